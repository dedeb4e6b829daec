"""Sample heating, through `gainbench record` with its defaults on the simulated bench.

The simulated sample heats with the pump power it absorbs (``simulation.sample_heating``, an
invented 5 K/W with a 0.3 s time constant here: about 22 K at the demo's pump current) and its
probe absorption cross-section rises 1 %/K (Yb near 1030 nm rises by about that much; a fact
of the trade, from memory); the pump driver's second temperature input reads the sample. The
outside reference is the simulated medium's own state (`summary --json`, from the medium's
slice populations, which the temperature does not enter): with the bench file's temperature
coefficient the corrected beta lies within 4 sigma_noise of it; re-analysed with the
coefficient set to zero (no correction), the same run is off by far more than that.
"""

from __future__ import annotations

import io
import json
from contextlib import redirect_stdout

import pytest
from cli_flags import ARM
from cli_runs import summary_json as summary

from bench.cli import main
from bench.store import RunReader

HEATING = [
    "--set",
    "simulation.sample_heating=5K/W",
    "--set",
    "simulation.sample_thermal_time_constant=0.3s",
    "--set",
    "sample.temperature_dependence.probe_absorption=1%/K",
]


@pytest.fixture(scope="module")
def heated(tmp_path_factory):
    logs = tmp_path_factory.mktemp("heating")
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(["record", "--quiet", "--logs", str(logs), *ARM, *HEATING])
    assert code == 0, buf.getvalue()
    return logs, buf.getvalue().strip().splitlines()[-1]


def test_the_run_records_the_sample_temperature_rising(heated):
    logs, run_id = heated
    with RunReader(logs / f"{run_id}.gbrun") as r:
        temps = [
            v
            for b in r.iter_blocks(source="pump")
            if "sample_temp" in b.channels
            for v in b.column("sample_temp")
        ]
    readings = [t for t in temps if t == t]  # NaN between the slow readings
    assert len(readings) > 10
    # ambient 22 degC = 295.15 K; heated by more than 10 K once the pump is on
    assert min(readings) == pytest.approx(295.15, abs=0.1) and max(readings) > 305.0


def test_the_corrected_beta_is_within_4_sigma_noise_of_the_truth(heated, capsys):
    logs, run_id = heated
    s = summary(logs, run_id, capsys)
    est, truth = s["estimates"]["beta"], s["truth"]["beta"]["value"]
    assert abs(est["value"] - truth) <= 4 * est["sigma_noise"], (est, truth)
    assert "temperature_unknown" not in s["flags"]


def test_without_the_correction_the_same_run_is_provably_wrong(heated, capsys):
    logs, run_id = heated
    capsys.readouterr()
    code = main(
        [
            "replay",
            run_id,
            "--logs",
            str(logs),
            "--headless",
            "--json",
            "--set",
            "sample.temperature_dependence.probe_absorption=0%/K",
        ]
    )
    assert code == 0
    out = json.loads(capsys.readouterr().out)
    s = summary(logs, run_id, capsys)
    beta = out["estimates"]["beta"]
    truth = s["truth"]["beta"]["value"]
    # the warmer sample absorbs more at the probe: read as less inversion, far beyond the noise
    assert (truth - beta["value"]) > 20 * beta["sigma_noise"], (beta, truth)


def test_replay_reproduces_the_stored_estimates(heated, capsys):
    logs, run_id = heated
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless"]) == 0
    assert "identical" in capsys.readouterr().out


def test_chopped_mode_corrects_the_warm_sample_in_both_half_periods(tmp_path, capsys):
    """Chopped at 50 ms against the sample's 0.3 s: the pump-off half-periods are nearly as warm
    as the pump-on ones, so the correction is the cross-sections' ratio, not the baseline's
    absorption (`bench.physics.ln_ratio_of_a_warm_modulated_sample`). Nearly: a first-order
    thermal model driven by a square wave swings by A tanh(T/4tau) peak to peak (A the full-power
    rise, T the period; common practice, no source), here about 0.9 K, so the pump-on halves are
    some 0.45 K warmer than the pump-off ones. The correction leaves that out and says so
    (``heating_ripple``); the test checks that it removes most of the error, and the flag."""
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = main(["record", "--mode", "chopped", "--quiet", "--logs", str(tmp_path), *ARM, *HEATING])
    assert code == 0, buf.getvalue()
    run_id = buf.getvalue().strip().splitlines()[-1]
    s = summary(tmp_path, run_id, capsys)
    est, truth = s["estimates"]["beta"], s["truth"]["beta"]["value"]
    assert "heating_ripple" in s["flags"], s["flags"]
    capsys.readouterr()
    code = main(
        [
            "replay",
            run_id,
            "--logs",
            str(tmp_path),
            "--headless",
            "--json",
            "--set",
            "sample.temperature_dependence.probe_absorption=0%/K",
        ]
    )
    assert code == 0
    beta = json.loads(capsys.readouterr().out)["estimates"]["beta"]
    # warm cross-sections are larger: uncorrected, the same inversion reads high
    assert (beta["value"] - truth) > 20 * beta["sigma_noise"], (beta, truth)
    # the ripple's share (about 0.45 K of sigma_a at 1 %/K, some 1.5e-4 in beta) is what is left
    assert abs(est["value"] - truth) < 0.2 * abs(beta["value"] - truth), (est, beta, truth)
