"""The main job end to end on the simulated bench, through the real transports (pyvisa-py over
loopback TCP, pyserial socket://): record, summary, replay, re-analysis, runs.

The simulator's own ground truth is the outside reference for the estimates; the replay is
checked against the stored live estimates (they must agree to 1e-9 relative)."""

from __future__ import annotations

import json

import pytest
from cli_flags import ARM

from bench.cli import main
from bench.store import RunReader


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    logs = tmp_path_factory.mktemp("logs")
    import io
    from contextlib import redirect_stdout

    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(["record", "--seconds", "1.5", "--quiet", "--logs", str(logs), *ARM])
    out = buf.getvalue()
    assert code == 0, out
    run_id = out.strip().splitlines()[-1]
    return logs, run_id, out


def test_record_stores_a_complete_run(recorded):
    logs, run_id, out = recorded
    path = logs / f"{run_id}.gbrun"
    with RunReader(path) as r:
        assert r.status == "complete"
        r.integrity_check()
        assert r.block_count("detector") > 10
        assert r.block_count("pump") > 10
        kinds = {e.kind for e in r.events()}
        assert {"guard", "checklist", "procedure", "run", "setting"} <= kinds
        assert r.meta["simulated"] is True
        assert "Quillmoor" in json.dumps(r.meta.get("instruments"))  # identities recorded
        assert r.truth(), "a simulated run stores the simulator's truth"


def test_summary_json_matches_truth(recorded, capsys):
    logs, run_id, _ = recorded
    assert main(["summary", run_id, "--logs", str(logs), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["run_id"] == run_id
    for key in ("ln_ratio", "gain_db", "gain_coefficient_per_cm", "n2_per_m3", "beta"):
        est, truth = out["estimates"][key], out["truth"][key]
        assert set(est) >= {"value", "sigma", "sigma_noise", "sigma_systematic"}
        # the bench file is the simulated medium's own (no parameter error): the truth lies
        # within 4 sigma_noise, the systematic part (stated uncertainties) plays no role
        assert abs(est["value"] - truth["value"]) <= 4 * est["sigma_noise"], (key, est, truth)


def test_replay_reproduces_the_stored_estimates(recorded, capsys):
    logs, run_id, _ = recorded
    assert main(["replay", run_id, "--logs", str(logs), "--headless", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["compared"] > 0
    assert out["max_relative_difference"] <= 1e-9
    assert out["analysis_id"] is None  # a plain replay writes nothing


def test_reanalysis_is_stored_beside_the_original(recorded, capsys):
    logs, run_id, _ = recorded
    path = logs / f"{run_id}.gbrun"
    with RunReader(path) as r:
        live = r.final_estimate(1)
        n_blocks = r.block_count()
    assert (
        main(["replay", run_id, "--logs", str(logs), "--headless", "--json", "--set", "sample.length=5.1mm"])
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    with RunReader(path) as r:
        assert r.block_count() == n_blocks  # raw data untouched
        assert r.final_estimate(1).values["beta"].value == live.values["beta"].value  # original untouched
        kinds = [a["kind"] for a in r.analyses()]
        assert kinds[0] == "live" and "reanalysis" in kinds
        re = r.final_estimate(out["analysis_id"])
    # the pump-induced change ln R / ((se+sa) L N): a 2 % longer sample gives a 2 % smaller one
    # (Beer-Lambert scaling); the probe-held part added back to it does not depend on L
    assert re.extra["beta_change"] == pytest.approx(live.extra["beta_change"] * 5.0 / 5.1, rel=1e-9)
    held = live.extra["beta_probe_held"]
    assert re.extra["beta_probe_held"] == held
    assert re.values["beta"].value == pytest.approx(live.extra["beta_change"] * 5.0 / 5.1 + held, rel=1e-9)


def test_runs_lists_the_run(recorded, capsys):
    logs, run_id, _ = recorded
    assert main(["runs", "--logs", str(logs)]) == 0
    text = capsys.readouterr().out
    assert run_id in text and "±" in text


def test_replay_refuses_non_sample_overrides(recorded, capsys):
    logs, run_id, _ = recorded
    assert main(["replay", run_id, "--logs", str(logs), "--headless", "--set", "guard.max_current=20A"]) == 2
    assert "only sample keys" in capsys.readouterr().err


def test_missing_run_is_a_clear_error(tmp_path, capsys):
    assert main(["summary", "nope", "--logs", str(tmp_path)]) == 2
    assert "nope" in capsys.readouterr().err
