"""Properties of the gain physics that must hold for any realistic parameters (hypothesis)."""

import math

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from bench import physics


def log_uniform(lo, hi):
    """Floats spread evenly in log between lo and hi."""
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0**e)


# realistic ranges, SI units (common practice, no source)
sigma = log_uniform(1e-26, 1e-22)  # 1e-22 .. 1e-18 cm²
sigma_or_zero = st.one_of(st.just(0.0), sigma)
length = log_uniform(1e-4, 0.1)
density = log_uniform(1e24, 1e27)
lifetime = log_uniform(1e-6, 1e-1)
wavelength = log_uniform(400e-9, 3e-6)
intensity = log_uniform(1e2, 1e11)
ln_ratio = st.floats(-5.0, 5.0)
fraction = st.floats(0.0, 1.0)


@given(ln_ratio, sigma, sigma_or_zero, length)
def test_ratio_to_density_to_ratio_round_trip(r, se, sa, ell):
    # identity of ln R = (sigma_e + sigma_a) L <N2> (Koechner sec. 1.4)
    n2 = physics.excited_density_from_ln_ratio(r, se, sa, ell)
    back = physics.ln_ratio_from_excited_density(n2, se, sa, ell)
    assert math.isclose(back, r, rel_tol=1e-12, abs_tol=1e-300)


@given(ln_ratio, ln_ratio, sigma, sigma_or_zero, length)
def test_density_increases_with_ln_ratio(r1, r2, se, sa, ell):
    # Koechner sec. 1.4: more transmission change means more excited ions
    n1 = physics.excited_density_from_ln_ratio(r1, se, sa, ell)
    n2 = physics.excited_density_from_ln_ratio(r2, se, sa, ell)
    assert (n1 < n2) == (r1 < r2) or r1 == r2


@given(fraction, fraction, density, sigma, sigma_or_zero)
def test_gain_coefficient_increases_with_excited_density(b1, b2, nt, se, sa):
    # Svelto sec. 2.8: dg/dN2 = sigma_e + sigma_a > 0
    g1 = physics.gain_coefficient(b1 * nt, nt, se, sa)
    g2 = physics.gain_coefficient(b2 * nt, nt, se, sa)
    if b1 <= b2:
        assert g1 <= g2
    if b1 + 1e-9 < b2:  # strictly, once the step is beyond float64 resolution
        assert g1 < g2


@given(intensity, intensity, wavelength, sigma, sigma_or_zero, lifetime)
def test_steady_state_increases_with_pump_and_stays_below_beta_max(i1, i2, lam, sap, sep, tau):
    # Koechner sec. 1.4: beta = beta_max I / (I + I_sat,p), increasing and bounded
    b1 = physics.steady_state_fraction(i1, lam, sap, sep, tau)
    b2 = physics.steady_state_fraction(i2, lam, sap, sep, tau)
    beta_max = sap / (sap + sep)
    assert 0.0 <= b1 <= beta_max * (1 + 1e-12)
    if i1 < i2:
        assert b1 <= b2
    if i1 < 0.5 * i2:
        assert b1 < b2


@given(ln_ratio, sigma, density, length, fraction)
def test_four_level_limit(r, se, nt, ell, beta):
    # Koechner sec. 1.4: a four-level medium has sigma_a = 0 at the signal
    assert physics.transparency_fraction(se, 0.0) == 0.0
    assert physics.net_gain(r, 0.0, nt, ell) == math.exp(r)
    n2 = beta * nt
    assert math.isclose(physics.gain_coefficient(n2, nt, se, 0.0), se * n2, rel_tol=1e-15)


@given(log_uniform(1e-8, 1e3), log_uniform(1e-3, 1e4), log_uniform(1e1, 1e5))
def test_frantz_nodvik_round_trip(x, g0, f_sat):
    # Frantz & Nodvik, J. Appl. Phys. 34, 2346 (1963): the relation is invertible in G0
    f_in = x * f_sat
    f_out = physics.frantz_nodvik_output(f_in, f_sat, g0)
    assert np.isfinite(f_out) and f_out > 0
    assert math.isclose(physics.frantz_nodvik_small_signal_gain(f_in, f_out, f_sat), g0, rel_tol=1e-8)


@given(log_uniform(1e-8, 1e6), log_uniform(1.0001, 1e4))
def test_frantz_nodvik_gain_lies_between_one_and_g0_for_an_amplifier(x, g0):
    # Frantz & Nodvik 1963: saturation only lowers the energy gain, never below 1
    out = physics.frantz_nodvik_output(x, 1.0, g0)
    assert x <= out <= g0 * x * (1 + 1e-12)


@given(fraction, density, intensity, wavelength, sigma, sigma_or_zero, lifetime,
       log_uniform(1e-9, 1e-1), log_uniform(1e-9, 1e-1))
def test_rate_equation_steps_compose_and_stay_in_range(b, nt, i_p, lam, sap, sep, tau, dt1, dt2):
    # exact solution of a linear ODE (Koechner sec. 1.4): two steps equal one step of the sum
    phi = physics.photon_flux(i_p, lam)
    n0 = b * nt
    two = physics.rate_equation_step(physics.rate_equation_step(n0, nt, phi, sap, sep, tau, dt1),
                                     nt, phi, sap, sep, tau, dt2)
    one = physics.rate_equation_step(n0, nt, phi, sap, sep, tau, dt1 + dt2)
    assert math.isclose(two, one, rel_tol=1e-9, abs_tol=1e-12 * nt)
    assert 0.0 <= one <= nt * (1 + 1e-12)


@given(wavelength, sigma_or_zero, log_uniform(1.5e-19, 2.5e-19), st.floats(4.0, 600.0))
def test_mccumber_round_trip(lam, sa, epsilon, temp):
    # McCumber, Phys. Rev. 136, A954 (1964): emission and absorption forms are inverses
    # (where the factor neither overflows nor underflows float64)
    se = physics.mccumber_emission(lam, sa, epsilon, temp)
    if sa == 0.0:
        assert se == 0.0
    elif 1e-280 < se < 1e280:
        back = physics.mccumber_absorption(lam, se, epsilon, temp)
        assert math.isclose(back, sa, rel_tol=1e-9, abs_tol=1e-300)
