"""The square-wave-pump response and the lock-in reading, checked against an independent
calculation: scipy.integrate.solve_ivp of the rate equation over many periods, then the
fundamental of the settled period by scipy.integrate.quad. Nothing here evaluates the closed
form to check the closed form."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special
from scipy.integrate import quad, solve_ivp

from bench import physics
from bench.physics import lockin_response as lr

# Invented Yb-like medium, SI: the rate equation dN2/dt = A N - k N2 (Svelto, ch. 7), with
# A = sigma_ap Phi_p + sigma_as Phi_s and k = (sigma_ap + sigma_ep) Phi_p + (sigma_as + sigma_es)
# Phi_s + 1/tau during the on half, Phi_p = 0 during the off half.
TAU = 0.6e-3
N_TOTAL = 2e26
SIGMA_AP, SIGMA_EP = 1.0e-24, 0.15e-24
SIGMA_AS, SIGMA_ES = 0.12e-24, 2.2e-24


def _rates(pump_flux, probe_flux):
    up_on = SIGMA_AP * pump_flux + SIGMA_AS * probe_flux
    up_off = SIGMA_AS * probe_flux
    k_on = (SIGMA_AP + SIGMA_EP) * pump_flux + (SIGMA_AS + SIGMA_ES) * probe_flux + 1 / TAU
    k_off = (SIGMA_AS + SIGMA_ES) * probe_flux + 1 / TAU
    return up_on, up_off, k_on, k_off


def reference(freq, pump_flux, probe_flux, periods=None):
    """(c1 of N2, c1 of the pump square wave, n_on, n_off, k_on, k_off, dense solution, t_last).

    solve_ivp integrates half period by half period (the forcing jumps at the edges) from the
    baseline state until the transient has died out (>= 40 / k_off); quad then takes the
    Fourier coefficient of the last period.
    """
    up_on, up_off, k_on, k_off = _rates(pump_flux, probe_flux)
    n_off = up_off * N_TOTAL / k_off
    n_on = up_on * N_TOTAL / k_on
    period = 1.0 / freq
    h = period / 2
    if periods is None:
        periods = max(4, math.ceil(40 / k_off / period) + 1)
    y = np.array([n_off])
    pieces = []
    for m in range(periods):
        for half, (up, k) in enumerate(((up_on, k_on), (up_off, k_off))):
            t0 = m * period + half * h
            sol = solve_ivp(
                lambda t, n, up=up, k=k: up * N_TOTAL - k * n,
                (t0, t0 + h),
                y,
                method="DOP853",
                rtol=1e-11,
                atol=1e-6 * N_TOTAL * 1e-6,
                dense_output=True,
            )
            y = sol.y[:, -1]
            if m == periods - 1:
                pieces.append(sol.sol)
    t_last = (periods - 1) * period
    w = 2 * math.pi * freq

    def coefficient(g):
        re = sum(
            quad(lambda t, p=p: g(p, t) * math.cos(w * t), t_last + i * h, t_last + (i + 1) * h)[0]
            for i, p in enumerate(pieces)
        )
        im = sum(
            quad(lambda t, p=p: -g(p, t) * math.sin(w * t), t_last + i * h, t_last + (i + 1) * h)[0]
            for i, p in enumerate(pieces)
        )
        return (re + 1j * im) / period

    c1_n = coefficient(lambda p, t: float(p(t)[0]))
    c1_pump = coefficient(lambda p, t: 1.0 if p is pieces[0] else 0.0)
    return c1_n, c1_pump, n_on, n_off, k_on, k_off, pieces, t_last, coefficient


PUMP_FLUX = 7.6e26  # photons m^-2 s^-1: W_p = 874 /s against 1/tau = 1667 /s (not small signal)
PROBE_FLUX = 5e25  # W_probe = 116 /s


@pytest.mark.parametrize("freq", [20.0, 150.0, 700.0, 3000.0])
def test_fundamental_matches_solve_ivp(freq):
    c1_n, c1_pump, n_on, n_off, k_on, k_off, *_ = reference(freq, PUMP_FLUX, PROBE_FLUX)
    # the pump's own square wave: c1 = 1 / (i pi) (Fourier series of a square wave, common
    # practice, no source), recovered by the same quadrature
    assert c1_pump == pytest.approx(1 / (1j * math.pi), abs=1e-9)
    expected = 2 * abs(c1_n) / (n_on - n_off) * np.exp(1j * (np.angle(c1_n) - np.angle(c1_pump)))
    got = physics.square_wave_fundamental(freq, k_on, k_off)
    assert got == pytest.approx(expected, rel=1e-6)


def test_vectorised_over_frequency():
    freqs = np.array([20.0, 700.0])
    _, _, k_on, k_off = _rates(PUMP_FLUX, PROBE_FLUX)
    got = physics.square_wave_fundamental(freqs, k_on, k_off)
    assert got.shape == (2,)
    for f, g in zip(freqs, got):
        c1_n, c1_pump, n_on, n_off, *_ = reference(f, PUMP_FLUX, PROBE_FLUX)
        ref = 2 * c1_n / c1_pump / (n_on - n_off) * (1 / math.pi)  # 2 |c1| with the pump's phase removed
        assert g == pytest.approx(ref, rel=1e-6)


def test_small_signal_limit_is_a_first_order_low_pass():
    # Lakowicz, Principles of Fluorescence Spectroscopy, ch. 5: tan(phi) = w tau,
    # m = 1 / sqrt(1 + (w tau)^2); here with the square wave's fundamental 2/pi
    freqs = np.array([10.0, 100.0, 265.0, 1000.0, 5000.0])
    k = 1 / TAU
    a = physics.first_order_fundamental(freqs, k)
    w = 2 * np.pi * freqs
    np.testing.assert_allclose(np.abs(a), (2 / np.pi) / np.sqrt(1 + (w * TAU) ** 2), rtol=1e-12)
    np.testing.assert_allclose(np.angle(a), -np.arctan(w * TAU), rtol=1e-12)
    # and solve_ivp with a pump so weak that k_on = k_off to 1e-6
    c1_n, c1_pump, n_on, n_off, k_on, k_off, *_ = reference(265.0, 1e21, 0.0)
    ref = 2 * abs(c1_n) / (n_on - n_off)
    assert abs(physics.first_order_fundamental(265.0, k_off)) == pytest.approx(ref, rel=1e-5)


def test_state_mean_and_edges_match_solve_ivp():
    freq = 400.0
    _, _, n_on, n_off, k_on, k_off, pieces, t_last, _ = reference(freq, PUMP_FLUX, PROBE_FLUX)
    h = 0.5 / freq
    t = np.linspace(0, 2 * h, 41)[:-1]
    ref = np.array([float(pieces[0 if ti < h else 1](t_last + ti)[0]) for ti in t])
    got = physics.square_wave_state(t, freq, k_on, k_off) * (n_on - n_off) + n_off
    np.testing.assert_allclose(got, ref, rtol=1e-7)
    u0, u1 = physics.square_wave_edges(freq, k_on, k_off)
    assert u0 * (n_on - n_off) + n_off == pytest.approx(float(pieces[0](t_last)[0]), rel=1e-7)
    assert u1 * (n_on - n_off) + n_off == pytest.approx(float(pieces[1](t_last + h)[0]), rel=1e-7)
    mean_ref = (
        quad(lambda x: float(pieces[0](x)[0]), t_last, t_last + h)[0]
        + quad(lambda x: float(pieces[1](x)[0]), t_last + h, t_last + 2 * h)[0]
    ) * freq
    assert physics.square_wave_mean(freq, k_on, k_off) * (n_on - n_off) + n_off == pytest.approx(
        mean_ref, rel=1e-7
    )


@pytest.mark.parametrize("ln_on", [0.02, 0.4])
def test_lockin_reading_of_the_exponential_probe(ln_on):
    # probe S = s_off exp(g (N2 - n_off)) (Beer-Lambert); lock-in X + iY = a / sqrt 2 in V rms
    # (Scofield, Am. J. Phys. 62, 129 (1994)); the reference fundamental and DC by quad
    freq = 300.0
    s_off = 0.8
    c1_n, c1_pump, n_on, n_off, k_on, k_off, pieces, t_last, coefficient = reference(
        freq, PUMP_FLUX, PROBE_FLUX
    )
    g = ln_on / (n_on - n_off)

    def probe(p, t):
        return s_off * math.exp(g * (float(p(t)[0]) - n_off))

    c1_s = coefficient(probe)
    h = 0.5 / freq
    c0_s = (
        quad(lambda x: probe(pieces[0], x), t_last, t_last + h)[0]
        + quad(lambda x: probe(pieces[1], x), t_last + h, t_last + 2 * h)[0]
    ) * freq
    expected = 2 * abs(c1_s) / math.sqrt(2) * np.exp(1j * (np.angle(c1_s) - np.angle(c1_pump)))
    xy, dc = physics.lockin_reading(freq, k_on, k_off, ln_on, s_off)
    assert xy == pytest.approx(expected, rel=1e-7)
    assert dc == pytest.approx(c0_s, rel=1e-9)
    # the linearised inverse recovers ln R to first order (relative error ~ ln R / 2)
    back = physics.ln_ratio_from_lockin(xy.real, xy.imag, dc, freq, k_on, k_off)
    assert back == pytest.approx(ln_on, rel=ln_on)


def test_rc_settle_time():
    # the step response of n equal RC poles is the Erlang distribution function
    # 1 - exp(-x) sum_{j<n} x^j / j! (Meade, Lock-in Amplifiers, ch. 3); checked by brute sum
    for order in (1, 2, 4):
        x = float(physics.rc_settle_time(1.0, order, 0.01))
        remaining = math.exp(-x) * sum(x**j / math.factorial(j) for j in range(order))
        assert remaining == pytest.approx(0.01, rel=1e-9)
    assert float(physics.rc_settle_time(0.1, 1, math.exp(-3))) == pytest.approx(0.3, rel=1e-12)
    with pytest.raises(ValueError, match="order"):
        physics.rc_settle_time(0.1, 0, 0.01)
    with pytest.raises(ValueError, match="tolerance"):
        physics.rc_settle_time(0.1, 2, 1.5)
    assert special.gammaincc(2, float(physics.rc_settle_time(1.0, 2, 0.05))) == pytest.approx(0.05)


FIT_FREQS = np.array([20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0])


@pytest.fixture(scope="module")
def measured():
    """Phase and amplitude of ln R's fundamental at each frequency, from the solve_ivp reference."""
    ln_on = 0.05
    phases, amps = [], []
    for f in FIT_FREQS:
        c1_n, c1_pump, n_on, n_off, *_ = reference(f, PUMP_FLUX, PROBE_FLUX)
        phases.append(float(np.angle(c1_n) - np.angle(c1_pump)))
        amps.append(ln_on * 2 * abs(c1_n) / (n_on - n_off))
    _, _, k_on, k_off = _rates(PUMP_FLUX, PROBE_FLUX)
    return np.array(phases), np.array(amps), k_on - k_off, k_off - 1 / TAU, ln_on


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_fit_lifetime_with_known_pump_rate(measured, seed):
    phases, _, w_p, w_probe, _ = measured
    rng = np.random.default_rng(seed)
    sigma = 0.004  # rad
    noisy = phases + rng.normal(0, sigma, phases.size)
    fit = physics.fit_lifetime_from_phase(FIT_FREQS, noisy, sigma, probe_rate=w_probe, pump_rate=w_p)
    assert fit.dof == FIT_FREQS.size - 1
    assert 0 < fit.tau_sigma < 0.05 * TAU
    assert abs(fit.tau - TAU) < 3 * fit.tau_sigma


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_fit_lifetime_and_pump_rate_from_phase_and_amplitude(measured, seed):
    phases, amps, w_p, w_probe, ln_on = measured
    rng = np.random.default_rng(seed)
    ps, as_ = 0.003, 2e-4
    fit = physics.fit_lifetime_from_phase(
        FIT_FREQS,
        phases + rng.normal(0, ps, phases.size),
        ps,
        amplitude=amps + rng.normal(0, as_, amps.size),
        amplitude_sigma=as_,
        probe_rate=w_probe,
    )
    assert fit.dof == 2 * FIT_FREQS.size - 3
    assert abs(fit.tau - TAU) < 3 * fit.tau_sigma
    assert abs(fit.pump_rate - w_p) < 3 * fit.pump_rate_sigma
    assert abs(fit.ln_ratio_on - ln_on) < 3 * fit.ln_ratio_on_sigma
    assert fit.tau_sigma < 0.1 * TAU


def test_bad_input_names_the_argument():
    with pytest.raises(ValueError, match="frequency"):
        physics.square_wave_fundamental(0.0, 1e3, 1e3)
    with pytest.raises(ValueError, match="k_on"):
        physics.square_wave_fundamental(10.0, -1.0, 1e3)
    with pytest.raises(ValueError, match="phase_sigma"):
        physics.fit_lifetime_from_phase([10, 20, 30], [0, 0, 0], [0.1, 0, 0.1])
    with pytest.raises(ValueError, match="amplitude_sigma"):
        physics.fit_lifetime_from_phase([10, 20, 30], [0, 0, 0], 0.1, amplitude=[1, 1, 1])
    with pytest.raises(ValueError, match="frequencies cannot determine"):
        physics.fit_lifetime_from_phase([10, 20], [0, 0], 0.1)
    assert lr.QUADRATURE_NODES * lr.PANELS >= 32
