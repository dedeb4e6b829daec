"""Properties of the gain physics that must hold for any realistic parameters (hypothesis).

The values are checked against references outside bench.physics: CODATA constants
(scipy.constants), the rate equations and the Beer-Lambert law integrated numerically
(scipy.integrate.solve_ivp, quad), the Frantz-Nodvik fluence equation integrated along the
amplifier, and a two-manifold Boltzmann model for McCumber (tests/stark_model.py). None of the
checks runs a function against its own inverse.
"""

import math

import numpy as np
import pytest
import stark_model
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import constants, integrate

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


# hc/e in eV m, CODATA via scipy.constants (exact in the 2019 SI)
HC_EV_M = constants.physical_constants["inverse meter-electron volt relationship"][0]


@pytest.mark.parametrize(
    ("wavelength", "ev"),
    [
        (1064e-9, 1.16527),  # hc/e / 1064 nm = 1.239841984e-6 / 1.064e-6 eV, by hand
        (976e-9, 1.27033),
        (1239.841984e-9, 1.0),  # the wavelength of a 1 eV photon (CODATA hc/e)
    ],
)
def test_photon_energy_matches_codata(wavelength, ev):
    assert HC_EV_M == pytest.approx(1.239841984e-6, rel=1e-9)
    assert physics.photon_energy(wavelength) / constants.e == pytest.approx(ev, abs=1e-5)


@given(wavelength, intensity)
def test_photon_energy_and_flux_match_codata_everywhere(lam, i):
    # E = (hc/e) / lambda in eV (CODATA); flux = I / E
    e_ev = HC_EV_M / lam
    assert math.isclose(physics.photon_energy(lam) / constants.e, e_ev, rel_tol=1e-12)
    assert math.isclose(physics.photon_flux(i, lam), i / (e_ev * constants.e), rel_tol=1e-12)


def test_photon_flux_worked_number():
    # 1 W/m^2 at 1064 nm: 1 / (1.16527 eV * 1.602176634e-19 J/eV) = 5.3563e18 photons/(m^2 s)
    assert physics.photon_flux(1.0, 1064e-9) == pytest.approx(5.3563e18, rel=1e-4)


def _probe_through_pumped_sample(n2_of_z, n_total, sigma_e, sigma_a, ell):
    """Probe intensity (per unit input) after the sample, pumped and unpumped: the Beer-Lambert
    law dI/dz = g(z) I integrated along z by scipy.integrate.solve_ivp, with the local gain
    coefficient g = sigma_e N2(z) - sigma_a (N_total - N2(z)) (Svelto, Principles of Lasers,
    sec. 2.8) and g = -sigma_a N_total unpumped."""

    def run(g):
        sol = integrate.solve_ivp(
            lambda z, i: g(z) * i, (0.0, ell), [1.0], method="DOP853", rtol=1e-12, atol=1e-300
        )
        return sol.y[0, -1]

    on = run(lambda z: sigma_e * n2_of_z(z) - sigma_a * (n_total - n2_of_z(z)))
    off = run(lambda z: -sigma_a * n_total)
    return on, off


@settings(max_examples=40, deadline=None)
@given(sigma, sigma_or_zero, length, density, st.floats(0.0, 1.0), st.floats(0.05, 20.0))
def test_excited_density_and_net_gain_against_beer_lambert_along_the_sample(se, sa, ell, nt, b0, depth):
    # a pump absorbed along the sample leaves beta(z) = b0 exp(-z / (depth L)); the length
    # average of N2 comes from scipy.integrate.quad, ln R and the net gain from the probe
    # integrated through the sample (Koechner, Solid-State Laser Engineering, sec. 1.4)
    assume((se + sa) * nt * ell < 40 and sa * nt * ell < 40)

    def n2_of_z(z):
        return nt * b0 * math.exp(-z / (depth * ell))

    on, off = _probe_through_pumped_sample(n2_of_z, nt, se, sa, ell)
    ln_r = math.log(on / off)
    mean_n2 = integrate.quad(n2_of_z, 0.0, ell, epsabs=0.0, epsrel=1e-12)[0] / ell
    # the integration gives ln(I_on / I_off) to about 1e-11 absolute (rtol 1e-12 on each)
    got = physics.excited_density_from_ln_ratio(ln_r, se, sa, ell)
    assert math.isclose(got, mean_n2, rel_tol=1e-7, abs_tol=1e-10 / ((se + sa) * ell))
    assert math.isclose(physics.net_gain(ln_r, sa, nt, ell), on, rel_tol=1e-8)
    assert math.isclose(
        physics.ln_ratio_from_excited_density(mean_n2, se, sa, ell), ln_r, rel_tol=1e-7, abs_tol=1e-10
    )


def test_net_gain_worked_number():
    # Invented Yb-like sample, by hand: sigma_e = 2.0e-24 m^2, sigma_a = 0.12e-24 m^2 at the
    # probe, N = 1.4e26 m^-3, L = 5 mm, uniform beta = 0.3: g = 2.0e-24 * 0.42e26
    # - 0.12e-24 * 0.98e26 = 84.0 - 11.76 = 72.24 m^-1, G = exp(72.24 * 0.005) = exp(0.3612)
    # = 1.4351; ln R = (2.12e-24 * 0.42e26) * 0.005 = 0.4452.
    ln_r = 0.4452
    assert physics.net_gain(ln_r, 0.12e-24, 1.4e26, 5e-3) == pytest.approx(1.4351, rel=1e-4)
    assert physics.excited_density_from_ln_ratio(ln_r, 2.0e-24, 0.12e-24, 5e-3) == pytest.approx(
        0.42e26, rel=1e-9
    )
    assert physics.gain_coefficient(0.42e26, 1.4e26, 2.0e-24, 0.12e-24) == pytest.approx(72.24)


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


def _integrate_rate_equation(n0, nt, phi_p, sap, sep, tau, t_end, phi_s=0.0, sas=0.0, ses=0.0):
    """dN2/dt = (sap N1 - sep N2) Phi_p + (sas N1 - ses N2) Phi_s - N2 / tau, N1 = nt - N2
    (Koechner sec. 1.4), integrated by scipy.integrate.solve_ivp (LSODA handles the stiff
    cases)."""

    def rhs(t, n2):
        n1 = nt - n2
        return (sap * n1 - sep * n2) * phi_p + (sas * n1 - ses * n2) * phi_s - n2 / tau

    sol = integrate.solve_ivp(rhs, (0.0, t_end), [n0], method="LSODA", rtol=1e-11, atol=1e-13 * nt)
    return sol.y[0, -1]


@settings(max_examples=40, deadline=None)
@given(
    intensity,
    wavelength,
    sigma,
    sigma_or_zero,
    lifetime,
    log_uniform(1e-4, 1e3),
    sigma_or_zero,
    sigma_or_zero,
)
def test_steady_state_fraction_is_where_the_rate_equation_settles(
    i_p, lam, sap, sep, tau, probe_share, sas, ses
):
    # reference: the rate equation integrated from the ground state for 60 lifetimes (every
    # relaxation rate is at least 1/tau, so the transient is below e^-60 of the start)
    i_s = probe_share * i_p
    lam_s = 1.08 * lam
    expected = _integrate_rate_equation(
        0.0,
        1.0,
        i_p / (HC_EV_M / lam * constants.e),
        sap,
        sep,
        tau,
        60 * tau,
        i_s / (HC_EV_M / lam_s * constants.e),
        sas,
        ses,
    )
    got = physics.steady_state_fraction(
        i_p,
        lam,
        sap,
        sep,
        tau,
        probe_intensity=i_s,
        probe_wavelength=lam_s,
        sigma_e_probe=ses,
        sigma_a_probe=sas,
    )
    assert math.isclose(got, expected, rel_tol=1e-6, abs_tol=1e-9)


@settings(max_examples=40, deadline=None)
@given(
    fraction,
    density,
    intensity,
    wavelength,
    sigma,
    sigma_or_zero,
    lifetime,
    log_uniform(1e-9, 1e-1),
    sigma_or_zero,
    sigma_or_zero,
    log_uniform(1e-4, 1e2),
)
def test_rate_equation_step_follows_the_integrated_transient(
    b, nt, i_p, lam, sap, sep, tau, dt, sas, ses, probe_share
):
    # reference: scipy.integrate.solve_ivp of the same rate equation over the step
    phi = i_p / (HC_EV_M / lam * constants.e)
    phi_s = probe_share * phi
    n0 = b * nt
    expected = _integrate_rate_equation(n0, nt, phi, sap, sep, tau, dt, phi_s, sas, ses)
    got = physics.rate_equation_step(
        n0, nt, phi, sap, sep, tau, dt, probe_flux=phi_s, sigma_as=sas, sigma_es=ses
    )
    assert math.isclose(got, expected, rel_tol=1e-6, abs_tol=1e-9 * nt)
    assert 0.0 <= got <= nt * (1 + 1e-12)


@given(ln_ratio, sigma, density, length, fraction)
def test_four_level_limit(r, se, nt, ell, beta):
    # Koechner sec. 1.4: a four-level medium has sigma_a = 0 at the signal
    assert physics.transparency_fraction(se, 0.0) == 0.0
    # numpy and math exponentials may differ in the last bit
    assert math.isclose(physics.net_gain(r, 0.0, nt, ell), math.exp(r), rel_tol=1e-15)
    n2 = beta * nt
    assert math.isclose(physics.gain_coefficient(n2, nt, se, 0.0), se * n2, rel_tol=1e-15)


def _fluence_through_amplifier(x_in, g0):
    """Output fluence over F_sat: dF/dz = g0 F_sat (1 - exp(-F / F_sat)) with a uniform
    small-signal gain coefficient g0 and exp(g0 L) = G0 (the fluence equation behind
    Frantz & Nodvik, J. Appl. Phys. 34, 2346 (1963); Siegman, Lasers, sec. 10.2, from memory),
    integrated along the amplifier by scipy.integrate.solve_ivp in zeta = z / L."""
    g0_l = math.log(g0)
    sol = integrate.solve_ivp(
        lambda zeta, u: -g0_l * np.expm1(-u), (0.0, 1.0), [x_in], method="DOP853", rtol=1e-12, atol=1e-300
    )
    return sol.y[0, -1]


@settings(max_examples=60, deadline=None)
@given(log_uniform(1e-8, 1e2), log_uniform(1e-3, 1e4), log_uniform(1e1, 1e5))
def test_frantz_nodvik_against_the_integrated_fluence_equation(x, g0, f_sat):
    # an amplifier (G0 > 1) or an absorber (G0 < 1); the inverse form recovers the G0 the
    # equation was integrated with
    f_in = x * f_sat
    expected = _fluence_through_amplifier(x, g0) * f_sat
    f_out = physics.frantz_nodvik_output(f_in, f_sat, g0)
    assert math.isclose(f_out, expected, rel_tol=1e-8)
    recovered = physics.frantz_nodvik_small_signal_gain(f_in, expected, f_sat)
    assert math.isclose(recovered, g0, rel_tol=1e-6)


def test_frantz_nodvik_worked_number():
    # Koechner sec. 4.1 form, by hand: F_in = F_sat, G0 = 10:
    # F_out = F_sat ln(1 + 10 (e - 1)) = F_sat ln(18.1828) = 2.9005 F_sat
    assert physics.frantz_nodvik_output(1.0, 1.0, 10.0) == pytest.approx(2.9005, abs=1e-4)


@given(log_uniform(1e-8, 1e6), log_uniform(1.0001, 1e4))
def test_frantz_nodvik_gain_lies_between_one_and_g0_for_an_amplifier(x, g0):
    # Frantz & Nodvik 1963: saturation only lowers the energy gain, never below 1
    out = physics.frantz_nodvik_output(x, 1.0, g0)
    assert x <= out <= g0 * x * (1 + 1e-12)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.floats(30.0, 900.0), min_size=1, max_size=4),
    st.lists(st.floats(30.0, 600.0), min_size=1, max_size=3),
    st.floats(9000.0, 11000.0),
    st.floats(20.0, 600.0),
)
def test_mccumber_against_a_two_manifold_boltzmann_model(lower, upper, zero_line, temp):
    # reference: Boltzmann populations of Stark levels summed level by level
    # (tests/stark_model.py); detailed balance gives McCumber's relation line by line,
    # Phys. Rev. 136, A954 (1964), with epsilon = E_zl + kT ln(Z_l / Z_u)
    lower_cm, upper_cm = [0.0] + lower, [0.0] + upper
    rng = np.random.default_rng(len(lower) * 10 + len(upper))
    strength = rng.uniform(0.2, 1.0, (len(lower_cm), len(upper_cm))) * 1e-24
    model = stark_model.spectra(
        temp, lower_cm=lower_cm, upper_cm=upper_cm, zero_line_cm=zero_line, strength=strength
    )
    assume(model.min_separation > 40)
    se = physics.mccumber_emission(model.wavelength, model.sigma_a, model.epsilon, temp)
    sa = physics.mccumber_absorption(model.wavelength, model.sigma_e, model.epsilon, temp)
    np.testing.assert_allclose(se, model.sigma_e, rtol=1e-9)
    np.testing.assert_allclose(sa, model.sigma_a, rtol=1e-9)
