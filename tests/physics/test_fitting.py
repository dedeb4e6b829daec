"""Curve fits: decay, pump saturation, Voigt lineshape, McCumber consistency.

References used by the checks: scipy.stats.linregress and scipy.optimize.curve_fit (general
purpose least squares, as independent implementations), scipy.special.voigt_profile, the
Olivero-Longbothum Voigt width formula (J. Quant. Spectrosc. Radiat. Transfer 17, 233, 1977),
pump sweeps made by integrating the rate equations with scipy.integrate.solve_ivp (slice by
slice along a thick sample), and McCumber spectra from a two-manifold Boltzmann model
(tests/stark_model.py; McCumber, Phys. Rev. 136, A954, 1964). The voigt_line shape itself is
checked against a numerical convolution in tests/physics/test_spectra.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import stark_model
from scipy import constants, integrate, optimize, special, stats

from bench import physics
from bench.physics import fitting

# ------------------------------------------------------------------ exponential decay


def test_decay_fit_on_an_exact_exponential_matches_a_straight_line_fit_of_its_log():
    # reference: scipy.stats.linregress of ln y against t (an exact exponential is a line)
    t = np.linspace(0.0, 3e-3, 40)
    y = 0.46 * np.exp(-t / 6.1e-4)
    fit = fitting.fit_exponential_decay(t, y)
    line = stats.linregress(t, np.log(y))
    assert fit.value("tau") == pytest.approx(-1.0 / line.slope, rel=1e-9)
    assert fit.value("amplitude") == pytest.approx(math.exp(line.intercept), rel=1e-9)


def test_decay_fit_agrees_with_plain_curve_fit_on_noisy_data():
    # reference: scipy.optimize.curve_fit on the unscaled model, absolute_sigma=False
    rng = np.random.default_rng(3)
    t = np.linspace(0.0, 3e-3, 60)
    sigma = 2e-3 * (1.0 + t / 3e-3)
    y = 0.3 * np.exp(-t / 6e-4) + rng.normal(0.0, sigma)
    fit = fitting.fit_exponential_decay(t, y, sigma)
    popt, pcov = optimize.curve_fit(
        lambda x, a, tau: a * np.exp(-x / tau), t, y, p0=[0.3, 6e-4], sigma=sigma, absolute_sigma=False
    )
    assert fit.values == pytest.approx(popt, rel=1e-6)
    assert fit.sigmas == pytest.approx(np.sqrt(np.diag(pcov)), rel=1e-4)


def test_decay_fit_sigma_is_calibrated_over_many_noisy_decays():
    # the standard deviation of tau over repeated noisy decays matches the reported sigma;
    # data: ln R proportional to N2 after the pump switches off, dN2/dt = -N2 / tau
    # integrated by scipy.integrate.solve_ivp (Koechner sec. 1.4), not the fitted exponential
    rng = np.random.default_rng(11)
    t = np.linspace(0.0, 3e-3, 50)
    decay = integrate.solve_ivp(
        lambda _, n: -n / 6e-4, (0.0, t[-1]), [0.5], t_eval=t, method="DOP853", rtol=1e-12, atol=1e-15
    ).y[0]
    taus, sigmas = [], []
    for _ in range(300):
        y = decay + rng.normal(0.0, 5e-3, t.size)
        fit = fitting.fit_exponential_decay(t, y)
        taus.append(fit.value("tau"))
        sigmas.append(fit.sigma("tau"))
    ratio = np.std(taus, ddof=1) / np.mean(sigmas)
    assert 0.85 < ratio < 1.15  # 300 samples: the std of a std is about 4 %
    assert abs(np.mean(taus) - 6e-4) < 3 * np.std(taus) / math.sqrt(300)


def test_decay_fit_of_a_negative_decay_and_bad_inputs():
    t = np.linspace(0.0, 1.0, 20)
    fit = fitting.fit_exponential_decay(t, -2.0 * np.exp(-t / 0.3))
    assert fit.value("amplitude") == pytest.approx(-2.0, rel=1e-9)
    assert fit.value("tau") == pytest.approx(0.3, rel=1e-9)
    with pytest.raises(ValueError, match="y"):
        fitting.fit_exponential_decay(t, np.exp(t / 0.3))  # growing, not decaying
    with pytest.raises(ValueError, match="t"):
        fitting.fit_exponential_decay(t[:2], t[:2])
    with pytest.raises(ValueError, match="sigma"):
        fitting.fit_exponential_decay(t, np.exp(-t), sigma=np.zeros_like(t))
    with pytest.raises(ValueError, match="tau_guess"):
        fitting.fit_exponential_decay(t, np.exp(-t), tau_guess=-1.0)


# ------------------------------------------------------------------ pump saturation

# An invented quasi-three-level medium pumped at 940 nm (realistic magnitudes, common practice,
# no source): cross-sections at the pump, upper-state lifetime, pumped area.
PUMP_WAVELENGTH = 940e-9
SIGMA_AP = 0.80e-24  # m^2
SIGMA_EP = 0.16e-24  # m^2
TAU = 0.95e-3  # s
AREA = math.pi * (55e-6) ** 2  # m^2
H_NU = constants.h * constants.c / PUMP_WAVELENGTH  # scipy.constants (CODATA)
# Truth of the steady-state solution (Koechner, Solid-State Laser Engineering, sec. 1.4), by
# hand: beta_max = 0.80 / 0.96 = 0.8333; p_sat = h nu A / ((sigma_ap + sigma_ep) tau)
# = 2.1132e-19 J * 9.503e-9 m^2 / (0.96e-24 m^2 * 0.95e-3 s) = 2.202 W.
BETA_MAX = SIGMA_AP / (SIGMA_AP + SIGMA_EP)
P_SAT = H_NU * AREA / ((SIGMA_AP + SIGMA_EP) * TAU)


def test_truth_of_the_invented_medium_by_hand():
    assert BETA_MAX == pytest.approx(0.8333, abs=1e-4)
    assert P_SAT == pytest.approx(2.202, abs=2e-3)


def _thin_sample_beta(p):
    """Excited fraction after 40 lifetimes of pumping from the ground state: the rate equation
    dbeta/dt = (sigma_ap (1 - beta) - sigma_ep beta) Phi - beta / tau integrated by
    scipy.integrate.solve_ivp (no steady-state formula used)."""
    out = []
    for power in np.atleast_1d(p):
        phi = power / (AREA * H_NU)
        sol = integrate.solve_ivp(
            lambda t, b, phi=phi: (SIGMA_AP * (1 - b) - SIGMA_EP * b) * phi - b / TAU,
            (0.0, 40 * TAU),
            [0.0],
            method="LSODA",
            rtol=1e-12,
            atol=1e-15,
        )
        out.append(sol.y[0, -1])
    return np.array(out)


def _thick_sample_beta(p, absorbance, slices=100):
    """Length-averaged excited fraction of a sample of unbleached pump absorbance
    ``sigma_ap N L``, from the rate equations of ``slices`` slices integrated together in time
    (scipy.integrate.solve_ivp). The pump enters slice i with the photon flux left by the
    slices before it (Beer-Lambert per slice, exp(-alpha_k dz)); a slice gains, per ion, the
    photons it absorbs net, Phi_i (1 - exp(-alpha_i dz)) / (N dz), and loses beta_i / tau."""
    n_dz = absorbance / SIGMA_AP / slices  # N dz, ions per m^2 in one slice
    out = []
    for power in np.atleast_1d(p):
        phi0 = power / (AREA * H_NU)

        def rhs(t, b, phi0=phi0):
            alpha_dz = n_dz * (SIGMA_AP * (1 - b) - SIGMA_EP * b)
            phi_in = phi0 * np.exp(-np.concatenate(([0.0], np.cumsum(alpha_dz)[:-1])))
            return phi_in * -np.expm1(-alpha_dz) / n_dz - b / TAU

        sol = integrate.solve_ivp(
            rhs, (0.0, 40 * TAU), np.zeros(slices), method="DOP853", rtol=1e-10, atol=1e-13
        )
        out.append(sol.y[:, -1].mean())
    return np.array(out)


def test_saturation_fit_recovers_beta_max_and_p_sat_within_sigma():
    # data: the rate equation integrated to steady state (solve_ivp), plus Gaussian noise
    rng = np.random.default_rng(5)
    p = np.array([0.4, 0.8, 1.5, 2.5, 4.0, 6.0, 8.5])
    exact = _thin_sample_beta(p)
    sigma = np.full(p.size, 0.004)
    z_b, z_p = [], []
    for _ in range(200):
        beta = exact + rng.normal(0.0, sigma)
        fit = fitting.fit_saturation(p, beta, sigma)
        z_b.append((fit.value("beta_max") - BETA_MAX) / fit.sigma("beta_max"))
        z_p.append((fit.value("p_sat") - P_SAT) / fit.sigma("p_sat"))
    for z in (np.array(z_b), np.array(z_p)):
        assert abs(np.mean(z)) < 0.25
        assert 0.8 < np.std(z) < 1.25
        assert 0.90 <= np.mean(np.abs(z) < 2) <= 0.99


def test_saturation_fit_exact_data_and_pdg_inflation():
    # noise-free data from the integrated rate equation: the fit returns the truth by hand
    p = np.array([0.5, 1.0, 2.0, 4.0, 8.0])
    beta = _thin_sample_beta(p)
    fit = fitting.fit_saturation(p, beta, np.full(p.size, 1e-3))
    assert fit.value("beta_max") == pytest.approx(BETA_MAX, rel=1e-7)
    assert fit.value("p_sat") == pytest.approx(P_SAT, rel=1e-7)
    # scatter ten times the stated sigma: the covariance is inflated by chi2/dof (PDG rule)
    rng = np.random.default_rng(1)
    noisy = beta + rng.normal(0.0, 1e-2, p.size)
    a = fitting.fit_saturation(p, noisy, np.full(p.size, 1e-3))
    b = fitting.fit_saturation(p, noisy, np.full(p.size, 1e-2))
    assert a.chi2_reduced > 1
    # a (sigma too small) is inflated to the scatter; b is left alone when its chi2/dof is below 1
    assert a.sigmas == pytest.approx(b.sigmas * min(1.0, math.sqrt(b.chi2_reduced)), rel=1e-3)


def test_thick_sample_fraction_matches_an_integration_of_the_pump_along_the_sample():
    # reference: scipy.integrate.solve_ivp of dI/dz = -alpha0 I / (1 + I / I_sat) along the
    # sample, the local excited fraction beta_max s / (1 + s) averaged over z (trapezoid rule)
    from scipy import integrate

    bmax, p_sat, absorbance = 0.87, 9.6, 1.0
    for p in (0.3, 4.0, 25.0):
        sol = integrate.solve_ivp(
            lambda z, s: -absorbance * s / (1 + s),
            (0.0, 1.0),
            [p / p_sat],
            dense_output=True,
            rtol=1e-12,
            atol=1e-14,
        )
        z = np.linspace(0.0, 1.0, 20001)
        s = sol.sol(z)[0]
        local = bmax * s / (1 + s)
        mean = float(np.sum(0.5 * (local[1:] + local[:-1]) * np.diff(z)))
        assert fitting.thick_sample_fraction(p, bmax, p_sat, absorbance) == pytest.approx(mean, rel=1e-7)
    # an optically thin sample: the plain steady-state form (bench.physics.beta_of_pump)
    p = np.array([0.0, 0.5, 3.0, 30.0])
    assert fitting.thick_sample_fraction(p, bmax, p_sat, 1e-7) == pytest.approx(
        physics.beta_of_pump(p, bmax, p_sat), rel=1e-6
    )
    # very strong pump: the whole sample bleaches to beta_max (no overflow on the way)
    assert fitting.thick_sample_fraction(1e7, bmax, p_sat, absorbance) == pytest.approx(bmax, rel=1e-5)


def test_saturation_fit_of_a_thick_sample():
    # data: 100 slices pumped one after the other, their rate equations integrated in time to
    # steady state (solve_ivp), length-averaged; unbleached pump absorbance 1.0
    p = np.array([0.5, 1.0, 2.0, 3.5, 5.5, 8.8])
    beta = _thick_sample_beta(p, 1.0)
    # the slicing is converged: halving the slices changes beta by less than 1e-9 (with the
    # photons counted exactly per slice, the steady-state length average does not depend on it)
    assert np.max(np.abs(_thick_sample_beta(p, 1.0, slices=50) - beta)) < 1e-9
    fit = fitting.fit_saturation(p, beta, np.full(p.size, 1e-4), absorbance=1.0)
    assert fit.value("beta_max") == pytest.approx(BETA_MAX, rel=1e-8)
    assert fit.value("p_sat") == pytest.approx(P_SAT, rel=1e-8)
    # the thin form does not describe these data: a poor chi-square
    assert fitting.fit_saturation(p, beta, np.full(p.size, 1e-4)).chi2_reduced > 100


def test_saturation_fit_rejects_bad_input():
    with pytest.raises(ValueError, match="p"):
        fitting.fit_saturation([1.0, 1.0, 1.0], [0.1, 0.1, 0.1], [0.01] * 3)
    with pytest.raises(ValueError, match="p"):
        fitting.fit_saturation([-1.0, 1.0, 2.0], [0.1, 0.2, 0.3], [0.01] * 3)


# ------------------------------------------------------------------ Voigt


@pytest.mark.parametrize(("sigma", "gamma"), [(1.0, 0.0), (0.0, 1.0), (0.8, 0.5)])
def test_voigt_fwhm_matches_a_numerical_half_maximum(sigma, gamma):
    # Olivero-Longbothum is accurate to about 0.02 %; check against the profile itself
    sigma = max(sigma, 1e-12)
    gamma = max(gamma, 1e-12)
    peak = special.voigt_profile(0.0, sigma, gamma)
    half = optimize.brentq(lambda x: special.voigt_profile(x, sigma, gamma) - peak / 2, 0.0, 50.0)
    assert fitting.voigt_fwhm(sigma, gamma) == pytest.approx(2 * half, rel=3e-4)


def test_voigt_fit_recovers_centre_and_both_widths():
    # a gain line near 1030 nm on a frequency axis, Gaussian and Lorentzian widths of 1 THz order
    rng = np.random.default_rng(7)
    nu = np.linspace(constants.c / 1060e-9, constants.c / 1000e-9, 31)
    truth = dict(height=60.0, centre=constants.c / 1031e-9, sigma_gauss=1.6e12, gamma_lorentz=1.1e12)
    sigma = np.full(nu.size, 0.2)

    # data from the Faddeeva function, not from voigt_line: V(x) is proportional to
    # Re w((x + i gamma) / (sigma sqrt 2)) (B. H. Armstrong, J. Quant. Spectrosc. Radiat.
    # Transfer 7, 61 (1967); scipy.special.wofz), scaled to its peak
    def faddeeva_line(x, height, centre, sigma_gauss, gamma_lorentz):
        z = (x - centre + 1j * gamma_lorentz) / (sigma_gauss * math.sqrt(2))
        z0 = 1j * gamma_lorentz / (sigma_gauss * math.sqrt(2))
        return height * special.wofz(z).real / special.wofz(z0).real

    exact_y = faddeeva_line(nu, **truth)
    zs = {k: [] for k in truth}
    for _ in range(60):
        y = exact_y + rng.normal(0.0, sigma)
        fit = fitting.fit_voigt(nu, y, sigma)
        for k, v in truth.items():
            zs[k].append((fit.value(k) - v) / fit.sigma(k))
    for k, z in zs.items():
        z = np.array(z)
        assert abs(np.mean(z)) < 0.45, k  # 60 fits: the mean of z has sigma 0.13
        assert 0.7 < np.std(z) < 1.35, k
    exact = fitting.fit_voigt(nu, exact_y, sigma)
    for k, v in truth.items():
        assert exact.value(k) == pytest.approx(v, rel=1e-6)


# ------------------------------------------------------------------ McCumber


def test_mccumber_check_accepts_a_consistent_spectrum_and_rejects_a_wrong_one():
    # spectra from a two-manifold Boltzmann model (tests/stark_model.py), which obey the
    # McCumber relation line by line with its own epsilon = E_zl + kT ln(Z_l / Z_u)
    temperature = 295.0
    model = stark_model.spectra(temperature)
    lam, sa, se, epsilon = model.wavelength, model.sigma_a, model.sigma_e, model.epsilon
    rng = np.random.default_rng(2)
    k_true = 5e-3 * 4e25  # L <N2>, m^-2
    sigma = np.full(lam.size, 2e-3)
    ln_r = k_true * (sa + se) + rng.normal(0.0, sigma)
    good = fitting.mccumber_consistency(lam, ln_r, sigma, sa, se, epsilon, temperature)
    assert good.consistent
    assert good.scale_mccumber == pytest.approx(k_true, abs=4 * good.scale_mccumber_sigma)
    assert good.config_max_log_deviation == pytest.approx(0.0, abs=1e-9)
    # the zero-line energy alone is the usual approximation of epsilon; for this model it is
    # off by kT ln(Z_u / Z_l), which the check reports as ln(1.4201 / 1.1362) = 0.223
    zero_line = stark_model.ZERO_LINE_CM * stark_model.WAVENUMBER
    approx = fitting.mccumber_consistency(lam, ln_r, sigma, sa, se, zero_line, temperature)
    assert approx.config_max_log_deviation == pytest.approx(0.2231, abs=1e-3)
    # the same data checked with a zero-line energy 3 kT away: inconsistent
    shifted = epsilon + 3 * constants.k * temperature
    bad = fitting.mccumber_consistency(lam, ln_r, sigma, sa, se, shifted, temperature)
    assert not bad.consistent
    assert bad.config_max_log_deviation == pytest.approx(3.0, rel=1e-9)
    with pytest.raises(ValueError, match="sigma_a"):
        fitting.mccumber_consistency(lam, ln_r, sigma, sa[:-1], se, epsilon, temperature)
