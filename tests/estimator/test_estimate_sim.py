"""The estimator end to end on the simulated bench (BenchModel directly, no sockets).

Scored against the simulator's own truth and against the physics of the rate equations:
the steady state of a quasi-three-level medium pumped at the pump wavelength saturates at
beta_max = sigma_ap / (sigma_ap + sigma_ep) with the saturation intensity
h nu_p / ((sigma_ap + sigma_ep) tau) (W. Koechner, Solid-State Laser Engineering, 6th ed.,
2006, sec. 1.4); the simulator spreads the pump evenly over its beam diameter (a top hat, its
documented model), so the saturation power is that intensity times pi D^2 / 4.
"""

from __future__ import annotations

import math

import pytest
from scipy import constants
from sim_blocks import model_blocks

from bench.estimator import (
    capture_baseline,
    capture_dark,
    new_state,
    report,
    update,
    with_baseline,
    with_dark,
    with_setting,
)

BenchModel = pytest.importorskip("simulated_instruments.optical_setup").BenchModel

RATE = 50e3


def _bench(cfg, seed):
    model = BenchModel(cfg, seed=seed, sample_rate=RATE)
    model.set_shutter("probe", False)
    dark = capture_dark(model_blocks(model, 2000))
    model.set_shutter("probe", True)
    return model, dark, capture_baseline(model_blocks(model, 5000), dark)


def _run(params, model, dark, baseline, mode, seconds, settings):
    state = with_baseline(with_dark(new_state(params, mode, settings), dark), baseline)
    for block in model_blocks(model, int(seconds * RATE)):
        state, _ = update(state, block)
    return report(state)[0]


@pytest.mark.parametrize("mode", ["watch", "chopped"])
def test_watch_and_chopped_find_the_true_ln_ratio(cfg, params, mode):
    model, dark, baseline = _bench(cfg, seed=3)
    model.set_pump(current=5.0, on=True)
    model.advance_to(model.t + 0.025)
    if mode == "chopped":
        model.set_modulation(50.0)
    est = _run(params, model, dark, baseline, mode, 0.4, {"pump_current": 5.0})
    if mode == "chopped":
        model.set_modulation(None)
        model.advance_to(model.t + 0.02)
    truth = model.truth()
    # The bench file is the medium's own (no parameter error): only the noise part of sigma
    # may separate the estimate from the truth.
    q = est.values["ln_ratio"]
    assert abs(q.value - truth["ln_ratio"]) < 4 * q.sigma_noise, (q, truth["ln_ratio"])
    assert est.flags == frozenset()
    b = est.values["beta"]
    assert abs(b.value - truth["beta"]) < 4 * b.sigma_noise, (b, truth["beta"])


def test_pump_sweep_finds_the_rate_equation_saturation(cfg, params):
    model, dark, baseline = _bench(cfg, seed=4)
    state = with_baseline(with_dark(new_state(params, "sweep"), dark), baseline)
    model.set_pump(current=1.0, on=True)
    for current in (1.0, 1.5, 2.5, 4.0, 6.0, 9.0):
        model.set_pump(current=current)
        state = with_setting(state, pump_current=current)
        for block in model_blocks(model, int(0.1 * RATE)):
            state, _ = update(state, block)
        point_truth = model.truth()["beta"]
        state_points = report(state)[0].extra["points"]
        last = state_points[-1]
        assert abs(last["beta"] - point_truth) < 4 * last["beta_sigma_noise"], (last, point_truth)
    (est,) = report(state)
    s = cfg.sample.sigma
    beta_max = s.pump_absorption / (s.pump_absorption + s.pump_emission)
    i_sat = (
        constants.h
        * constants.c
        / cfg.pump.wavelength
        / ((s.pump_absorption + s.pump_emission) * cfg.sample.upper_state_lifetime)
    )
    p_sat = i_sat * math.pi * cfg.pump.beam_diameter**2 / 4
    bm, ps = est.values["beta_max"], est.values["p_sat_w"]
    # the bench file is nominal here, so the estimate is held to 1 % (a 24-slice model)
    assert bm.value == pytest.approx(beta_max, rel=0.01)
    assert ps.value == pytest.approx(p_sat, rel=0.01)
    assert abs(bm.value - beta_max) < 4 * bm.sigma_noise, (bm, beta_max)
    assert abs(ps.value - p_sat) < 4 * ps.sigma_noise, (ps, p_sat)
    assert est.extra["fits"]["saturation"]["model"] == "thick"


@pytest.mark.parametrize("mode", ["chopped", "decay"])
def test_default_timing_gives_noise_limited_estimates(cfg, params, mode):
    # The defaults a user gets (`record --mode chopped|decay`): the pump period from the
    # settle windows at the default current, the estimator's own settle windows. Scored
    # against the simulator's truth within 4 sigma_noise (no parameter error here). The
    # former defaults (half-period and rise settle window both 10 tau) gave no cycle at all.
    from bench.run.pump_program import chop_frequency, default_current

    current = default_current(cfg)
    settings = {"pump_current": current, "pump_power": cfg.pump.power_at(current)}
    model, dark, baseline = _bench(cfg, seed=5)
    model.set_pump(current=current, on=True)
    model.advance_to(model.t + 0.025)
    truth = model.truth()
    model.set_modulation(chop_frequency(cfg, mode))
    est = _run(params, model, dark, baseline, mode, 2.0, settings)
    assert not est.flags & {"not_settled", "low_snr"}, est.flags
    q = est.values["ln_ratio"]
    assert abs(q.value - truth["ln_ratio"]) < 4 * q.sigma_noise, (q, truth["ln_ratio"])
    assert q.sigma_noise < 1e-4  # noise-limited: no per-run constant in it
    if mode == "decay":
        t = est.values["tau_s"]
        assert abs(t.value - cfg.sample.upper_state_lifetime) < 4 * t.sigma_noise, t
    else:
        assert est.extra["n_cycles"] >= 30
