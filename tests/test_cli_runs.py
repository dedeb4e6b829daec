"""The run commands a user types: export, import, and a forced trip as `summary` shows it."""

from __future__ import annotations

import io
import json
from contextlib import redirect_stdout

import pandas as pd
import pytest
from cli_flags import ARM

from bench.cli import main


def _record(logs, *extra):
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(["record", "--quiet", "--logs", str(logs), *ARM, *extra])
    assert code == 0, buf.getvalue()
    return buf.getvalue().strip().splitlines()[-1], buf.getvalue()


def test_forced_interlock_trip_shows_in_summary(tmp_path, capsys):
    run_id, out = _record(tmp_path, "--seconds", "6", "--fault", "interlock@4s+0.5s")
    assert "guard TRIPPED" in out and "trip acknowledged" in out
    capsys.readouterr()
    assert main(["summary", run_id, "--logs", str(tmp_path), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    (trip,) = [
        t for t in summary["trips"] if "interlock" in t["reason"] or t["condition"] == "current_not_following"
    ][:1]
    assert trip["latency_s"] is not None and trip["latency_s"] <= 0.1
    assert trip["acknowledged_by"] == "tester"
    assert main(["summary", run_id, "--logs", str(tmp_path)]) == 0
    text = capsys.readouterr().out
    assert "TRIP at t =" in text and "latency" in text and "acknowledged by tester" in text


def test_export_and_import_round_trip(tmp_path, capsys):
    run_id, _ = _record(tmp_path, "--seconds", "1")
    capsys.readouterr()
    out_csv = tmp_path / "blocks.csv"
    assert (
        main(
            [
                "export",
                run_id,
                "--logs",
                str(tmp_path),
                "--what",
                "blocks",
                "--source",
                "detector",
                "--out",
                str(out_csv),
            ]
        )
        == 0
    )
    frame = pd.read_csv(out_csv)
    assert {"probe", "reference", "pump_monitor"} <= set(frame.columns)
    assert len(frame) > 1000
    assert (
        main(
            [
                "export",
                run_id,
                "--logs",
                str(tmp_path),
                "--what",
                "estimates",
                "--format",
                "parquet",
                "--out",
                str(tmp_path / "est.parquet"),
            ]
        )
        == 0
    )
    est = pd.read_parquet(tmp_path / "est.parquet")
    assert "beta_value" in est.columns and len(est) > 0
    # the exported detector samples imported back as a run of their own
    scope = tmp_path / "scope.csv"
    time_col = [c for c in frame.columns if c.startswith("t")][0]
    small = frame.iloc[:20000]
    pd.DataFrame(
        {
            "t": small[time_col] - small[time_col].iloc[0],
            "ch1": small["probe"],
            "ch2": small["reference"],
            "trig": (small["pump_monitor"] > 0.1).astype(int),
        }
    ).to_csv(scope, index=False)
    capsys.readouterr()
    assert (
        main(
            [
                "import",
                str(scope),
                "--columns",
                "time=t,probe=ch1,reference=ch2,pump_on=trig",
                "--logs",
                str(tmp_path / "imported"),
            ]
        )
        == 0
    )
    assert capsys.readouterr().out.strip()


@pytest.mark.parametrize(
    ("columns", "message"),
    [
        ("time=t,probe=ch1", "missing reference, pump_on"),
        ("time=t,probe=ch1,reference=ch2,pump_on=trig,colour=x", "unknown signal 'colour'"),
        ("time", "is not NAME=COLUMN"),
    ],
)
def test_import_column_errors(tmp_path, capsys, columns, message):
    scope = tmp_path / "scope.csv"
    scope.write_text("t,ch1,ch2,trig\n0,1,1,0\n", encoding="utf-8")
    assert main(["import", str(scope), "--columns", columns, "--logs", str(tmp_path)]) == 2
    assert message in capsys.readouterr().err
