"""Acceptance: `gainbench record --mode sweep` with default settings, then `gainbench summary
--json`, as a user runs them (through `bench.cli.main`, on the simulated bench).

Scored against two things outside the estimator:

* the simulated medium's own truth of each step (its length-averaged absolute excited
  fraction over the step's time span, recorded by the simulator);
* the thin-sample saturation power of the rate equations, ``h nu_p / ((sigma_ap + sigma_ep)
  tau)`` times the pumped area (W. Koechner, *Solid-State Laser Engineering*, 6th ed., 2006,
  sec. 1.4), with h and c from scipy.constants (CODATA). The simulator spreads the pump evenly
  over its beam diameter (a top hat, its documented model), so the area is pi D^2 / 4. The
  demo sample is optically thick (pump absorbance 1); the sweep fit's thick-sample model
  (`bench.physics.fitting.thick_sample_fraction`) has that same local saturation power as its
  parameter, so the figure applies unchanged.

The simulated sample has no parameter error, so each check is against the *noise* part of the
uncertainty: within 4 sigma_noise per step, within 3 sigma_noise for the fitted p_sat.

Default settings throughout, the simulated bench's slow drift of the probe/reference ratio
included: every step is chopped, so each is referred to its own pump-off half-periods (a step
referred to the baseline taken before the sweep moved by up to 4.6 sigma_noise with the drift).
The truth of a step is the median of the medium's rows taken at least one settle window after
the last pump edge (`bench.store.summary`).
"""

from __future__ import annotations

import json
import math

import pytest
from cli_flags import ARM
from scipy import constants

from bench.cli import main
from bench.config import load_bench


def _thin_sample_p_sat(cfg) -> float:
    s = cfg.sample
    h_nu = constants.h * constants.c / cfg.pump.wavelength
    i_sat = h_nu / ((s.sigma.pump_absorption + s.sigma.pump_emission) * s.upper_state_lifetime)
    return i_sat * math.pi * cfg.pump.beam_diameter**2 / 4


@pytest.mark.parametrize("seed", [11, pytest.param(12, marks=pytest.mark.slow)])  # the second in the slow set
def test_sweep_has_every_step_and_a_fit_that_matches_the_rate_equations(tmp_path, capsys, seed):
    logs = tmp_path / "logs"
    code = main(
        [
            "record",
            "--mode",
            "sweep",
            "--logs",
            str(logs),
            "--quiet",
            *ARM,
            "--set",
            f"simulation.seed={seed}",
        ]
    )
    assert code == 0
    run_id = capsys.readouterr().out.strip().splitlines()[-1]
    assert main(["summary", run_id, "--logs", str(logs), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    cfg = load_bench()

    steps = out["steps"]
    assert len(steps) == 6  # `record --steps` default: as many points as steps
    currents = [st["pump_current_a"] for st in steps]
    assert currents == sorted(currents) and len(set(currents)) == 6
    for st in steps:
        beta, truth = st["beta"], st["truth"]
        assert truth is not None, st
        assert abs(beta["value"] - truth["beta"]["value"]) < 4 * beta["sigma_noise"], st
        ln = st["ln_ratio"]
        assert abs(ln["value"] - truth["ln_ratio"]["value"]) < 4 * ln["sigma_noise"], st

    # the top-level figures are the last step's, beside that step's truth
    last = steps[-1]
    assert out["estimates"]["beta"]["value"] == pytest.approx(last["beta"]["value"], rel=1e-12)
    assert out["truth"]["beta"]["value"] == pytest.approx(last["truth"]["beta"]["value"], rel=1e-9)
    assert out["truth_source"].startswith("medium")

    fit = out["fit"]
    p_sat = _thin_sample_p_sat(cfg)
    assert abs(fit["p_sat_w"]["value"] - p_sat) < 3 * fit["p_sat_w"]["sigma_noise"], (fit, p_sat)
    s = cfg.sample.sigma
    beta_max = s.pump_absorption / (s.pump_absorption + s.pump_emission)  # Koechner sec. 1.4
    assert abs(fit["beta_max"]["value"] - beta_max) < 4 * fit["beta_max"]["sigma_noise"], fit

    # a replay closes the last step the same way and reproduces every stored estimate
    assert main(["replay", run_id, "--logs", str(logs), "--headless", "--json"]) == 0
    rep = json.loads(capsys.readouterr().out)
    assert rep["compared"] > 0 and rep["max_relative_difference"] <= 1e-9

    # the table shows the same
    assert main(["summary", run_id, "--logs", str(logs)]) == 0
    text = capsys.readouterr().out
    assert "sweep: 6 steps" in text and "fitted p_sat" in text and "fitted beta_max" in text
