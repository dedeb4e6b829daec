"""Export: what pandas and pyarrow read back from the exported CSV and Parquet files equals
what the run holds, value for value.

References: pandas.read_csv (text cells turned into floats by Python's correctly rounded
``float()``) and pyarrow.parquet as the independent readers; CSV shape per RFC 4180 (a header
line, then one record per line).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from bench.errors import RunStoreError
from bench.records import Block, Estimate, Event, Quantity
from bench.store import RunReader, RunWriter, open_for_analysis
from bench.store.export import export_run


@pytest.fixture
def run(tmp_path):
    rng = np.random.default_rng(7)
    with RunWriter.create(tmp_path / "logs", bench_text="", sample_id="E") as w:
        for seq in range(5):
            data = rng.normal(0.5, 0.01, size=(300, 2))
            w.append_block(Block("detector", seq, seq * 3e-3, 1e-5, seq * 300, ("probe", "reference"), data))
            w.append_block(
                Block(
                    "pump",
                    seq,
                    seq * 3e-3 + 1e-4,
                    0.0,
                    -1,
                    ("pump_current", "mount_temp"),
                    np.array([[2.0 + seq, 298.15]]),
                )
            )
        w.append_estimates(
            [
                Estimate(
                    0.005,
                    "watch",
                    "window",
                    {"beta": Quantity(0.3, 0.02, 0.02, 0.0)},
                    frozenset({"low_snr"}),
                    500,
                ),
                Estimate(
                    0.01,
                    "watch",
                    "cumulative",
                    {"beta": Quantity(0.31, 0.01, 0.008, 0.006), "tau_s": Quantity(6e-4, 1e-5, 1e-5, 0.0)},
                    frozenset(),
                    1500,
                    {"fit": [1, 2]},
                ),
            ]
        )
        w.append_event(Event(0.0, "run", "started"))
        w.append_event(Event(0.002, "setting", "pump current 2 A", "ada", {"current_a": 2.0}))
        path = w.path
    with open_for_analysis(path, "reanalysis", {"sample.length": "5.1 mm"}) as a:
        a.append_estimates(
            Estimate(0.01, "watch", "cumulative", {"beta": Quantity(0.33, 0.01)}, frozenset(), 1500)
        )
    return path


def _read_csv_exact(path) -> pd.DataFrame:
    """pandas reads the cells as text; ``float()`` (correctly rounded) makes the numbers."""
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    for col in frame.columns:
        try:
            frame[col] = [float(x) if x != "" else math.nan for x in frame[col]]
        except ValueError:
            pass  # a text column
    return frame


def _expected_samples(path) -> pd.DataFrame:
    """Slow, obvious reference: one dict per sample, straight from the reader."""
    rows = []
    with RunReader(path) as r:
        for b in r.iter_blocks():
            for i, t in enumerate(b.times()):
                row = {"time": t, "source": b.source}
                row.update({c: b.data[i, k] for k, c in enumerate(b.channels)})
                rows.append(row)
    return pd.DataFrame(rows, columns=["time", "source", "probe", "reference", "pump_current", "mount_temp"])


def _same(a: pd.DataFrame, b: pd.DataFrame) -> None:
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b)
    for col in a.columns:
        if a[col].dtype.kind == "f" or b[col].dtype.kind == "f":
            x, y = a[col].to_numpy(float), b[col].to_numpy(float)
            assert np.array_equal(x, y, equal_nan=True), col  # exact, not approximate
        else:
            assert a[col].astype(str).tolist() == b[col].astype(str).tolist(), col


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_blocks_round_trip_one_row_per_sample(run, tmp_path, fmt):
    out = tmp_path / f"blocks.{fmt}"
    # A small chunk size, so the export is written in many chunks (and row groups).
    assert export_run(run, fmt, "blocks", out, chunk_rows=400) == out
    if fmt == "csv":
        got = _read_csv_exact(out)
    else:
        got = pd.read_parquet(out)
        assert pq.ParquetFile(out).num_row_groups > 1
    expected = _expected_samples(run)
    assert len(got) == 5 * 300 + 5
    _same(got, expected)
    assert math.isnan(got.loc[got.source == "pump", "probe"].iloc[0])


def test_blocks_of_one_source(run, tmp_path):
    out = tmp_path / "pump.csv"
    export_run(run, "csv", "blocks", out, source="pump")
    got = _read_csv_exact(out)
    assert list(got.columns) == ["time", "source", "pump_current", "mount_temp"]
    assert got["pump_current"].tolist() == [2.0, 3.0, 4.0, 5.0, 6.0]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_estimates_flattened_with_every_analysis(run, tmp_path, fmt):
    out = tmp_path / f"estimates.{fmt}"
    export_run(run, fmt, "estimates", out)
    got = _read_csv_exact(out) if fmt == "csv" else pd.read_parquet(out)
    assert list(got.columns[:7]) == ["t", "mode", "scope", "analysis", "analysis_kind", "n_samples", "flags"]
    assert {"beta_value", "beta_sigma", "beta_sigma_noise", "beta_sigma_systematic", "tau_s_value"} <= set(
        got.columns
    )
    assert got["analysis"].tolist() == [1, 1, 2]
    assert got["analysis_kind"].tolist() == ["live", "live", "reanalysis"]
    assert got["beta_value"].tolist() == [0.3, 0.31, 0.33]
    assert got["beta_sigma_systematic"].tolist() == [0.0, 0.006, 0.0]
    assert math.isnan(got["tau_s_value"][0]) and got["tau_s_value"][1] == 6e-4
    assert json.loads(got["extra"][1]) == {"fit": [1, 2]}
    assert str(got["flags"][0]) == "low_snr"
    only = tmp_path / f"only.{fmt}"
    export_run(run, fmt, "estimates", only, analysis_id=2)
    got = pd.read_csv(only) if fmt == "csv" else pd.read_parquet(only)
    assert got["beta_value"].tolist() == [0.33]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_events_as_rows(run, tmp_path, fmt):
    out = tmp_path / f"events.{fmt}"
    export_run(run, fmt, "events", out)
    got = pd.read_csv(out) if fmt == "csv" else pd.read_parquet(out)
    assert got["kind"].tolist() == ["run", "setting"]
    assert got["who"].tolist() == ["gainbench", "ada"]
    assert json.loads(got["data"][1]) == {"current_a": 2.0}


def test_empty_run_gives_a_header_only(tmp_path):
    with RunWriter.create(tmp_path, bench_text="", sample_id="none") as w:
        path = w.path
    export_run(path, "csv", "blocks", tmp_path / "b.csv")
    assert (tmp_path / "b.csv").read_text() == "time,source\n"
    export_run(path, "parquet", "blocks", tmp_path / "b.parquet")
    assert pq.read_table(tmp_path / "b.parquet").num_rows == 0
    export_run(path, "csv", "estimates", tmp_path / "e.csv")
    assert len(pd.read_csv(tmp_path / "e.csv")) == 0


def test_refuses_to_overwrite_and_bad_arguments(run, tmp_path):
    out = tmp_path / "x.csv"
    out.write_text("keep me")
    with pytest.raises(RunStoreError, match="already exists"):
        export_run(run, "csv", "events", out)
    assert out.read_text() == "keep me"
    export_run(run, "csv", "events", out, overwrite=True)
    assert out.read_text().startswith("t,kind,who,text,data\n")
    with pytest.raises(ValueError, match="fmt"):
        export_run(run, "xlsx", "events", tmp_path / "y")
    with pytest.raises(ValueError, match="what"):
        export_run(run, "csv", "samples", tmp_path / "y")
    with pytest.raises(RunStoreError, match="no such run file"):
        export_run(tmp_path / "missing.gbrun", "csv", "events", tmp_path / "y.csv")
    assert not (tmp_path / "y.csv").exists() and not (tmp_path / "y.csv.partial").exists()
    with pytest.raises(RunStoreError, match="has no analysis 9"):
        export_run(run, "csv", "estimates", tmp_path / "z.csv", analysis_id=9)
    assert not (tmp_path / "z.csv").exists()
