"""The demo bench with a lock-in amplifier as its detector, through the command line with its
defaults: `record --mode lockin`, the frequency series, summary, replay, and the refusals.

The outside reference is the simulated medium's own state (`summary --json` gives it beside
the estimates, from the medium's slice populations, not from the estimator): on a simulated
sample with no parameter error the estimate lies within 4 sigma_noise of it; the fitted
lifetime within 3 sigma of the bench file's lifetime, which the simulated medium decays with.
The replay is checked against the stored live estimates ("identical" in replay's own compare).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from cli_flags import ARM
from cli_runs import record_run
from cli_runs import summary_json as summary

from bench.cli import main
from bench.store import RunReader

DATA = Path(__file__).resolve().parents[2] / "bench" / "data"
LOCKIN_BENCH = str(DATA / "demo_lockin_bench.toml")
METER_BENCH = str(DATA / "demo_meter_bench.toml")


def record(logs: Path, *extra: str) -> tuple[str, str]:
    return record_run(logs, "--config", LOCKIN_BENCH, *extra)


@pytest.fixture(scope="module")
def one_frequency(tmp_path_factory):
    logs = tmp_path_factory.mktemp("lockin-logs")
    run_id, _ = record(logs, "--seconds", "8")  # the README command: lockin is the bench's default mode
    return logs, run_id


@pytest.fixture(scope="module")
def frequency_series(tmp_path_factory):
    logs = tmp_path_factory.mktemp("lockin-series")
    run_id, out = record(logs, "--mode", "lockin", "--frequencies", "20Hz,50Hz,100Hz,200Hz,500Hz")
    return logs, run_id, out


def test_beta_and_ln_ratio_within_4_sigma_noise_of_the_truth(one_frequency, capsys):
    logs, run_id = one_frequency
    s = summary(logs, run_id, capsys)
    assert s["mode"] == "lockin" and s["status"] == "complete"
    assert "overload" not in s["flags"] and "phase_mismatch" not in s["flags"], s["flags"]
    for key in ("ln_ratio", "beta"):
        est, truth = s["estimates"][key], s["truth"][key]["value"]
        assert est["sigma_noise"] > 0
        assert abs(est["value"] - truth) < 4 * est["sigma_noise"], (key, est, truth)


def test_the_run_stores_the_lockins_readings_at_their_own_times(one_frequency):
    logs, run_id = one_frequency
    with RunReader(logs / f"{run_id}.gbrun") as r:
        assert "QL-7" in json.dumps(r.meta.get("instruments"))
        blocks = list(r.iter_blocks(source="detector"))
        names = blocks[0].channels
    for name in ("lockin_x", "lockin_y", "reference_hz", "probe", "overload"):
        assert name in names, names
    times = [b.t0 for b in blocks]
    assert all(b > a for a, b in zip(times, times[1:]))
    assert len(blocks) > 8 * 15  # poll_rate 20 Hz for more than the 8 s


def test_one_frequency_replay_reproduces_the_stored_estimates(one_frequency, capsys):
    logs, run_id = one_frequency
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless"]) == 0
    out = capsys.readouterr().out
    assert "identical" in out, out


def test_frequency_series_gives_tau_within_3_sigma_and_its_steps(frequency_series, capsys):
    logs, run_id, out = frequency_series
    assert "modulation 500 Hz (5 of 5)" in out
    s = summary(logs, run_id, capsys)
    truth_tau = s["truth"]["tau_s"]["value"]
    assert truth_tau == pytest.approx(0.6e-3)  # the bench file's lifetime (medium's own decay)
    tau = s["estimates"]["tau_s"]
    assert abs(tau["value"] - truth_tau) < 3 * tau["sigma"], tau
    assert tau["sigma"] < 0.02 * truth_tau  # a measurement, not a shrug
    steps = s["steps"]
    assert [st["frequency_hz"] for st in steps] == pytest.approx([20, 50, 100, 200, 500])
    for st in steps:
        for key in ("x_v", "y_v", "phase_rad", "dc_v"):
            assert math.isfinite(st[key]), (key, st)
        assert st["phase_rad"] == pytest.approx(math.atan2(st["y_v"], st["x_v"]), abs=0.01)
    # the medium lags more at higher frequency: tan(phi) ~ -w/k (Lakowicz ch. 5)
    phases = [st["phase_rad"] for st in steps]
    assert all(b < a for a, b in zip(phases, phases[1:])), phases
    # the series' ln R (the fit's) against the medium's CW state
    est = s["estimates"]["ln_ratio"]
    assert abs(est["value"] - s["truth"]["ln_ratio"]["value"]) < 4 * est["sigma_noise"], est


def test_frequency_series_replay_reproduces_the_stored_estimates(frequency_series, capsys):
    logs, run_id, _ = frequency_series
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless"]) == 0
    out = capsys.readouterr().out
    assert "identical" in out and "tau_s" in out, out


def test_a_lockin_bench_refuses_the_other_modes(tmp_path, capsys):
    for mode in ("watch", "chopped"):
        code = main(["record", "--config", LOCKIN_BENCH, "--mode", mode, "--logs", str(tmp_path), *ARM])
        assert code == 2, mode
        assert "lock-in" in capsys.readouterr().err
    assert not list(tmp_path.glob("*.gbrun"))


@pytest.mark.parametrize("bench", [None, METER_BENCH])
def test_lockin_mode_needs_a_lockin(bench, tmp_path, capsys):
    config = ["--config", bench] if bench else []
    code = main(["record", *config, "--mode", "lockin", "--logs", str(tmp_path), *ARM])
    assert code == 2
    assert "lock-in" in capsys.readouterr().err
    assert not list(tmp_path.glob("*.gbrun"))


@pytest.mark.parametrize(
    "value, words",
    [("20Hz,fast", "fast"), ("20Hz,-5Hz", "-5"), ("", "frequenc"), ("20 kHz", "above")],
)
def test_bad_frequencies_are_named(value, words, tmp_path, capsys):
    code = main(
        [
            "record",
            "--config",
            LOCKIN_BENCH,
            "--mode",
            "lockin",
            "--frequencies",
            value,
            "--logs",
            str(tmp_path),
            *ARM,
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert "--frequencies" in err and words in err, err
    assert not list(tmp_path.glob("*.gbrun"))


def test_frequencies_belong_to_lockin_mode(tmp_path, capsys):
    code = main(["record", "--frequencies", "20Hz", "--logs", str(tmp_path), *ARM])
    assert code == 2
    assert "--frequencies: applies to lockin mode" in capsys.readouterr().err
