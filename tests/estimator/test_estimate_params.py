"""Estimator parameters, the uncertainty model of the figures, dark and baseline capture, pulsed probes.

External references: CODATA constants through scipy.constants; the saturation intensity
h nu / ((sigma_e + sigma_a) tau) (W. Koechner, Solid-State Laser Engineering, 6th ed., 2006,
sec. 4.1); the on-axis intensity 2P / (pi w^2) of a Gaussian beam (A. E. Siegman, Lasers, 1986,
sec. 17.1); linear uncertainty propagation checked by Monte Carlo (JCGM 101:2008, GUM
Supplement 1); the Frantz-Nodvik output fluence (J. Appl. Phys. 34, 2346, 1963) integrated
over a Gaussian profile with scipy.integrate.quad.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate

from bench.estimator import (
    Baseline,
    Dark,
    EstimatorParams,
    capture_baseline,
    capture_dark,
    figures,
    new_state,
    pulsed_small_signal_ln_ratio,
    with_baseline,
    with_dark,
    with_setting,
)
from bench.estimator.cost import estimator_cost_per_sample
from bench.records import Block

CHANNELS = ("probe", "reference", "pump_monitor")


# ------------------------------------------------------------------ parameters


def test_parameters_from_the_demo_bench(cfg, params):
    s = cfg.sample
    assert params.sigma_e == s.sigma.probe_emission and params.sigma_a == s.sigma.probe_absorption
    assert params.settle_time == pytest.approx(5 * s.upper_state_lifetime)
    assert params.decay_tail_start == pytest.approx(8 * s.upper_state_lifetime)
    assert params.detector_range == pytest.approx(2.0)  # options range = "2 V"
    assert params.monitor_per_watt == pytest.approx(0.1)  # [simulation] pump_monitor_per_watt
    assert params.pump_threshold(4.0) == pytest.approx(0.5 * 0.1 * 4.0)
    assert params.pump_threshold(0.0) == math.inf
    assert params.pump_power_at(5.0) == pytest.approx(cfg.pump.power_at(5.0))
    faster = EstimatorParams.from_config(cfg, tau=1e-4)
    assert faster.settle_time == pytest.approx(5e-4) and faster.decay_bin == pytest.approx(1e-5)
    with pytest.raises(ValueError, match="colour"):
        EstimatorParams.from_config(cfg, colour=1)
    with pytest.raises(ValueError, match="window"):
        EstimatorParams.from_config(cfg, window=-1.0)
    with pytest.raises(ValueError, match="decay_reference"):
        params.replace(decay_reference="guess")


def test_probe_weakness_of_the_demo_bench(cfg, params):
    # the probe's power-weighted mean intensity P / (pi w^2), half of I_peak = 2 P / (pi w^2)
    # (Siegman 17.1), over I_sat = h nu / ((se + sa) tau) (Koechner 4.1)
    w = cfg.probe.beam_diameter / 2
    i_mean = cfg.probe.power / (math.pi * w * w)
    h_nu = constants.h * constants.c / cfg.probe.wavelength
    s = cfg.sample
    i_sat = h_nu / ((s.sigma.probe_emission + s.sigma.probe_absorption) * s.upper_state_lifetime)
    assert params.probe_saturation() == pytest.approx(i_mean / i_sat, rel=1e-12)
    assert params.probe_saturation() < cfg.probe.weak_fraction


# ------------------------------------------------------------------ uncertainty model


def test_systematic_sigmas_agree_with_a_monte_carlo_propagation(params):
    # JCGM 101:2008: draw the uncertain inputs, compute the figure, take the spread
    lnr = 0.46
    vals = figures(params, lnr, 1e-5)
    rng = np.random.default_rng(0)
    m = 200_000
    L = params.length + params.u_length * rng.standard_normal(m)
    N = params.n_total * (1 + params.u_n_total * rng.standard_normal(m))
    se = params.sigma_e * (1 + params.u_cross_sections * rng.standard_normal(m))
    sa = params.sigma_a * (1 + params.u_cross_sections * rng.standard_normal(m))
    n2 = lnr / ((se + sa) * L)
    mc = {
        "n2_per_m3": n2,
        "beta": n2 / N,
        "gain_linear": np.exp(lnr - sa * N * L),
        "gain_coefficient_per_cm": (se * n2 - sa * (N - n2)) / 100,
    }
    for key, sample in mc.items():
        assert vals[key].sigma_systematic == pytest.approx(np.std(sample), rel=0.03), key
    assert vals["gain_db"].sigma_systematic == pytest.approx(
        np.std(10 * np.log10(mc["gain_linear"])), rel=0.03
    )
    # the noise part is ln R's noise carried through the same formulas; totals add in quadrature
    for q in vals.values():
        assert q.sigma == pytest.approx(math.hypot(q.sigma_noise, q.sigma_systematic), rel=1e-12)
    assert vals["ln_ratio"].sigma_systematic == 0.0
    assert vals["beta"].sigma_noise == pytest.approx(
        1e-5 / ((params.sigma_e + params.sigma_a) * params.length * params.n_total), rel=1e-12
    )


# ------------------------------------------------------------------ dark and baseline


def _noise_blocks(rng, n, levels, sigma, size=1000):
    data = np.column_stack([lv + rng.normal(0.0, sigma, n) for lv in levels])
    return [
        Block("detector", k, i * 1e-5, 1e-5, i, CHANNELS, data[i : i + size])
        for k, i in enumerate(range(0, n, size))
    ]


def test_dark_and_baseline_means_and_standard_errors():
    rng = np.random.default_rng(4)
    n, sigma = 20_000, 5e-4
    dark = capture_dark(_noise_blocks(rng, n, (0.003, 0.002, 0.0), sigma))
    assert dark.probe == pytest.approx(0.003, abs=4 * sigma / math.sqrt(n))
    # white noise: the batch-mean error is sigma / sqrt(N) (20 batches: within about 30 %)
    assert dark.probe_sigma == pytest.approx(sigma / math.sqrt(n), rel=0.3)
    assert dark.reference_sigma == pytest.approx(sigma / math.sqrt(n), rel=0.3)
    assert dark.n_samples == n
    blocks = _noise_blocks(rng, n, (0.003 + 0.8, 0.002 + 0.6, 0.0), sigma)
    base = capture_baseline(blocks, dark)
    assert base.value == pytest.approx(0.8 / 0.6, rel=1e-4)
    rel = math.hypot(sigma / 0.8, sigma / 0.6) / math.sqrt(n)
    assert base.sigma / base.value == pytest.approx(rel, rel=0.3)
    assert base.t == pytest.approx(blocks[-1].t_end) and base.t_start == 0.0
    with pytest.raises(ValueError, match="blocks"):
        capture_dark([])
    with pytest.raises(ValueError, match="blocks"):
        capture_baseline(_noise_blocks(rng, 100, (0.5, 0.001, 0.0), 1e-6), dark)  # reference below dark


# ------------------------------------------------------------------ pulsed probe


def _gaussian_energy_gain(g0, f_peak, f_sat):
    """Reference: Frantz-Nodvik F_out = F_s ln(1 + G0 (exp(F_in / F_s) - 1)), integrated over a
    Gaussian profile F(r) = F_peak exp(-2 r^2 / w^2) with w = 1 (scipy.integrate.quad)."""

    def f_out(r):
        f_in = f_peak * math.exp(-2 * r * r)
        return f_sat * math.log1p(g0 * math.expm1(f_in / f_sat)) * 2 * math.pi * r

    e_out, _ = integrate.quad(f_out, 0.0, 6.0, epsabs=0, epsrel=1e-12, limit=200)
    e_in = f_peak * math.pi / 2
    return e_out / e_in


def test_pulsed_probe_is_corrected_to_the_small_signal_gain(params):
    se, sa = params.sigma_e, params.sigma_a
    f_sat = constants.h * constants.c / params.probe_wavelength / (se + sa)
    pulsed = params.replace(probe_kind="pulsed", probe_peak=0.5 * f_sat)
    ln_r0 = 0.46
    ln_t0 = -sa * params.n_total * params.length
    measured = math.log(
        _gaussian_energy_gain(math.exp(ln_r0 + ln_t0), 0.5 * f_sat, f_sat)
        / _gaussian_energy_gain(math.exp(ln_t0), 0.5 * f_sat, f_sat)
    )
    assert measured < 0.95 * ln_r0  # the pulse saturates what it measures
    assert pulsed_small_signal_ln_ratio(measured, pulsed, se, sa) == pytest.approx(ln_r0, rel=1e-6)
    vals = figures(pulsed, measured, 1e-4)
    assert vals["ln_ratio"].value == pytest.approx(ln_r0, rel=1e-6)
    assert vals["ln_ratio"].sigma_noise > 1e-4  # the correction stretches the noise too
    # F / F_sat with the pulse's power-weighted mean fluence, half its peak (Siegman sec. 17.1)
    assert pulsed.probe_saturation() == pytest.approx(0.25)
    # a very weak pulse needs no correction
    weak = params.replace(probe_kind="pulsed", probe_peak=1e-9 * f_sat)
    assert pulsed_small_signal_ln_ratio(0.3, weak, se, sa) == pytest.approx(0.3, rel=1e-6)


# ------------------------------------------------------------------ state plumbing and cost


def test_state_changes_are_pure(params):
    st = new_state(params, "watch", {"pump_power": 4.0})
    assert with_setting(st, pump_power=4.0) is st
    moved = with_setting(st, pump_power=5.0)
    assert st.settings["pump_power"] == 4.0 and moved.settings["pump_power"] == 5.0
    dark = Dark(0.003, 0.0, 0.002, 0.0, 10, 0.0)
    assert with_dark(st, dark).dark is dark and st.dark is None
    base = Baseline(1.3, 1e-6, 10, 0.0, 0.0)
    assert with_baseline(st, base).baseline is base and st.baseline is None
    with pytest.raises(ValueError, match="dark"):
        with_dark(st, 0.003)
    with pytest.raises(ValueError, match="method"):
        with_setting(new_state(params, "sweep"), method="chopped")


@pytest.mark.parametrize("mode", ["watch", "chopped", "decay", "sweep"])
def test_cost_measurement_runs_in_every_mode(mode):
    # a figure for the report, not a speed assertion
    cost = estimator_cost_per_sample(mode, rate=1e5, seconds=0.3, block_size=10_000)
    assert math.isfinite(cost) and cost >= 0.0
    with pytest.raises(ValueError, match="mode"):
        estimator_cost_per_sample("stare")
