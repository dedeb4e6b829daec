"""The pump-induced background on the probe detector, through `gainbench record` with its
defaults on the simulated bench.

The simulated medium sends ``simulation.fluorescence_on_probe`` (here 20 uW at full inversion,
proportional to its excited population) to the probe detector. The dark, taken with the pump
off, holds none of it. The outside reference is the simulated medium's own state
(`summary --json` gives it beside the estimates, from the medium's slice populations): with the
background step (the default in watch mode) beta lies within 4 sigma_noise of it; without it
(`--no-background`) the same bench is off by far more than 4 sigma_noise, which is the error
the step exists for. The replay is checked against the stored live estimates.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from cli_runs import record_run
from cli_runs import summary_json as summary

from bench.cli import main
from bench.store import RunReader

FLUORESCENCE = ["--set", "simulation.fluorescence_on_probe=20uW"]


def record(logs: Path, *extra: str) -> tuple[str, str]:
    return record_run(logs, *extra)


def z_scores(s: dict) -> dict[str, float]:
    return {
        name: (s["estimates"][name]["value"] - s["truth"][name]["value"])
        / s["estimates"][name]["sigma_noise"]
        for name in ("ln_ratio", "beta")
    }


@pytest.fixture(scope="module")
def with_step(tmp_path_factory):
    logs = tmp_path_factory.mktemp("background")
    run_id, out = record(logs, *FLUORESCENCE)
    return logs, run_id, out


def test_with_the_background_step_beta_is_within_4_sigma_noise(with_step, capsys):
    logs, run_id, out = with_step
    assert "capturing background (pump on, probe shutter closed)" in out
    s = summary(logs, run_id, capsys)
    assert s["status"] == "complete" and s["mode"] == "watch"
    for name, z in z_scores(s).items():
        assert abs(z) <= 4.0, (name, z, s["estimates"][name], s["truth"][name])


def test_without_it_the_same_bench_is_provably_wrong(tmp_path, capsys):
    run_id, out = record(tmp_path, *FLUORESCENCE, "--no-background")
    assert "capturing background" not in out
    s = summary(tmp_path, run_id, capsys)
    z = z_scores(s)
    # fluorescence adds to the pumped probe only: ln R and beta read high, by far more than noise
    assert z["ln_ratio"] > 20 and z["beta"] > 20, z


def test_the_background_is_stored_and_replayed(with_step, capsys):
    logs, run_id, _ = with_step
    with RunReader(logs / f"{run_id}.gbrun") as r:
        events = [e for e in r.events() if e.data.get("control") == "background"]
    assert len(events) == 1 and events[0].data["ok"], events
    assert "background captured" in events[0].text
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless"]) == 0
    assert "identical" in capsys.readouterr().out


def test_no_fluorescence_gives_a_background_within_noise_of_zero(tmp_path):
    """The demo bench has no fluorescence on the probe: the background is the dark's level, so
    the step changes nothing beyond its noise."""
    run_id, out = record(tmp_path)
    line = next(x for x in out.splitlines() if "background captured" in x)
    words = line.split()
    level, sigma = float(words[words.index("probe") + 1]), float(words[words.index("±") + 1])
    assert abs(level) <= 4 * sigma, line


def test_background_needs_the_pump_on_and_the_dark_the_pump_off(tmp_path):
    from bench.config import load_bench
    from bench.run.measurement import Measurement, MeasurementError
    from bench.safety.checklist_answers import answers_from_flags

    cfg = load_bench(overrides={"guard.stale_after": "2 s"})
    with Measurement(cfg, log_dir=tmp_path) as m:
        with pytest.raises(MeasurementError, match="pump must be on"):
            m.capture_background()
        m.capture_dark()
        m.capture_baseline()
        assert m.arm(answers_from_flags("tester", {940e-9: 5, 1030e-9: 2}, True), "tester").passed
        m.set_current(6.0, who="tester")
        m.emit("tester")
        with pytest.raises(MeasurementError, match="the pump is on; the dark is taken with the pump off"):
            m.capture_dark()
        assert "background captured" in m.capture_background()
        m.stop_emission()


def test_chopped_mode_takes_the_background_from_settled_pump_on_samples(tmp_path, capsys):
    """Chopped at its default period the fluorescence follows the pump with the medium's
    lifetime; the background is the settled pump-on level, subtracted from the pump-on half
    periods the estimate uses. With it beta is within 4 sigma_noise; without it, far off."""
    run_id, out = record(tmp_path, "--mode", "chopped", *FLUORESCENCE)
    assert "capturing background" in out
    z = z_scores(summary(tmp_path, run_id, capsys))
    assert all(abs(v) <= 4.0 for v in z.values()), z
    run_id, _ = record(tmp_path, "--mode", "chopped", *FLUORESCENCE, "--no-background")
    z = z_scores(summary(tmp_path, run_id, capsys))
    assert z["beta"] > 20, z
