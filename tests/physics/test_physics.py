"""Gain physics checked against constants, handbook values and reference integrators."""

import math

import numpy as np
import pytest
import stark_model
from scipy import constants
from scipy.integrate import solve_ivp, trapezoid
from scipy.optimize import brentq

from bench import physics

H, C, K_B, EV = constants.h, constants.c, constants.k, constants.eV
CM2 = 1e-4  # m² per cm²


# --- photons ---------------------------------------------------------------------------


def test_photon_energy_is_h_c_over_lambda():
    # CODATA h and c through scipy.constants
    lam = np.array([532e-9, 1064e-9, 1550e-9])
    np.testing.assert_allclose(physics.photon_energy(lam), H * C / lam, rtol=1e-15)


def test_photon_energy_at_1064_nm_is_1_165_ev():
    # 1.165 eV at 1064 nm (Nd:YAG line, common practice, no source); eV from scipy.constants
    assert physics.photon_energy(1064e-9) / EV == pytest.approx(1.165, abs=5e-4)


def test_scalar_in_gives_numpy_float_out_and_arrays_keep_shape():
    # common practice, no source: numpy ufunc conventions
    assert isinstance(physics.photon_energy(1e-6), np.float64)
    assert physics.photon_energy(np.full((2, 3), 1e-6)).shape == (2, 3)


def test_photon_flux_counts_photons():
    # 1 W at 1064 nm is 1 / (h c / lambda) photons per second (scipy.constants)
    assert physics.photon_flux(1.0, 1064e-9) == pytest.approx(1064e-9 / (H * C), rel=1e-15)


# --- saturation: Nd:YAG handbook values --------------------------------------------------


def test_nd_yag_saturation_intensity_is_about_2_9_kw_per_cm2():
    # Koechner, Solid-State Laser Engineering: Nd:YAG, sigma_e = 2.8e-19 cm², tau = 230 us,
    # I_sat about 2.9 kW/cm² (from memory)
    i_sat = physics.saturation_intensity(1064e-9, 2.8e-19 * CM2, 0.0, 230e-6)
    assert i_sat * CM2 == pytest.approx(2.9e3, rel=0.02)


def test_nd_yag_saturation_fluence_is_about_0_67_j_per_cm2():
    # Koechner, Solid-State Laser Engineering: Nd:YAG F_sat about 0.67 J/cm² (from memory)
    f_sat = physics.saturation_fluence(1064e-9, 2.8e-19 * CM2, 0.0)
    assert f_sat * CM2 == pytest.approx(0.67, rel=0.02)


def test_quasi_three_level_saturation_uses_the_sum_of_cross_sections():
    # Koechner sec. 1.4: I_sat = h nu / ((sigma_e + sigma_a) tau); doubling the sum halves it
    one = physics.saturation_intensity(1030e-9, 2e-24, 0.0, 1e-3)
    two = physics.saturation_intensity(1030e-9, 2e-24, 2e-24, 1e-3)
    assert two == pytest.approx(one / 2, rel=1e-14)


# --- transparency, gain ------------------------------------------------------------------


def test_gain_coefficient_vanishes_at_the_transparency_fraction():
    # Koechner sec. 1.4: g = 0 at beta_tr = sigma_a / (sigma_a + sigma_e)
    se, sa, nt = 2.0e-24, 0.12e-24, 1.4e26
    beta_tr = physics.transparency_fraction(se, sa)
    assert physics.gain_coefficient(beta_tr * nt, nt, se, sa) == pytest.approx(0.0, abs=1e-12 * se * nt)
    assert physics.gain_coefficient(1.1 * beta_tr * nt, nt, se, sa) > 0
    assert physics.gain_coefficient(0.9 * beta_tr * nt, nt, se, sa) < 0


def test_net_gain_equals_exp_of_gain_coefficient_times_length():
    # Svelto sec. 2.8: single-pass gain exp(g L), with ln R = (sigma_e + sigma_a) N2 L
    se, sa, nt, length, n2 = 2.0e-24, 0.12e-24, 1.4e26, 2e-3, 0.3e26
    ln_r = physics.ln_ratio_from_excited_density(n2, se, sa, length)
    g = physics.gain_coefficient(n2, nt, se, sa)
    assert physics.net_gain(ln_r, sa, nt, length) == pytest.approx(math.exp(g * length), rel=1e-12)


def test_unpumped_transmission_and_full_inversion_bound_the_gain():
    # Beer-Lambert (Svelto sec. 2.4): no excitation gives exp(-alpha L); full inversion
    # gives exp(sigma_e N L) (Koechner sec. 1.4)
    se, sa, nt, length = 2.0e-24, 0.12e-24, 1.4e26, 2e-3
    assert physics.net_gain(0.0, sa, nt, length) == physics.unpumped_transmission(sa, nt, length)
    full_ln_r = physics.ln_ratio_from_excited_density(nt, se, sa, length)
    assert physics.net_gain(full_ln_r, sa, nt, length) == pytest.approx(
        physics.full_inversion_gain(se, nt, length), rel=1e-12
    )
    # an optical density of 1 (base e) transmits 1/e
    assert physics.unpumped_transmission(1e-24, 1e26, 1e-2) == pytest.approx(math.exp(-1.0), rel=1e-14)


def test_decibels_and_per_centimetre():
    # IEC 60027-3: a factor 2 in power is 3.0103 dB; a factor 10 is 10 dB
    assert physics.gain_db(2.0) == pytest.approx(3.0103, abs=1e-4)
    assert physics.gain_db(10.0) == pytest.approx(10.0, rel=1e-15)
    # SI prefixes (BIPM SI Brochure): 1 m^-1 = 0.01 cm^-1
    assert physics.per_m_to_per_cm(250.0) == pytest.approx(2.5, rel=1e-15)
    # exp(g * 1 cm) in dB is the dB/cm figure (IEC 60027-3)
    g = 37.0
    assert physics.per_m_to_db_per_cm(g) == pytest.approx(physics.gain_db(math.exp(g * 0.01)), rel=1e-12)


# --- McCumber ----------------------------------------------------------------------------


def test_mccumber_cross_sections_are_equal_at_the_zero_line():
    # McCumber, Phys. Rev. 136, A954 (1964): sigma_e = sigma_a where h nu = epsilon
    lam0 = 975e-9
    epsilon = H * C / lam0
    assert physics.mccumber_emission(lam0, 1.3e-24, epsilon, 295.0) == pytest.approx(1.3e-24, rel=1e-12)


@pytest.mark.parametrize("temperature", [77.0, 295.0, 450.0])
def test_mccumber_matches_a_two_manifold_boltzmann_model(temperature):
    # An independent reference (tests/stark_model.py): Stark levels of two manifolds populated
    # by the Boltzmann law, each line absorbing with p_lower S and emitting with p_upper S; by
    # detailed balance sigma_e / sigma_a = (Z_l / Z_u) exp((E_zl - h nu) / kT) line by line,
    # which is McCumber's relation with epsilon = E_zl + kT ln(Z_l / Z_u) (D. E. McCumber,
    # Phys. Rev. 136, A954 (1964)). Nothing in the model calls the project's McCumber code.
    sp = stark_model.spectra(temperature)
    assert sp.min_separation > 10  # neighbouring lines add nothing at a line centre
    np.testing.assert_allclose(
        physics.mccumber_emission(sp.wavelength, sp.sigma_a, sp.epsilon, temperature), sp.sigma_e, rtol=1e-9
    )
    np.testing.assert_allclose(
        physics.mccumber_absorption(sp.wavelength, sp.sigma_e, sp.epsilon, temperature), sp.sigma_a, rtol=1e-9
    )
    # long wavelengths (h nu < epsilon) have more emission than absorption (McCumber 1964)
    longer = sp.wavelength > H * C / sp.epsilon
    assert longer.any() and np.all(sp.sigma_e[longer] > sp.sigma_a[longer])


def test_mccumber_keeps_zero_cross_section_zero_even_where_the_factor_overflows():
    # McCumber 1964: sigma_e is proportional to sigma_a; at 4 K far from the zero line the
    # factor exceeds the float64 range (common practice, no source)
    epsilon = H * C / 975e-9
    assert physics.mccumber_emission(1.5e-6, 0.0, epsilon, 4.0) == 0.0
    assert math.isinf(physics.mccumber_emission(1.5e-6, 1e-24, epsilon, 4.0))


# --- Füchtbauer-Ladenburg ------------------------------------------------------------------


def _gaussian_line(lam0=1030e-9, fwhm=0.5e-9, scale=37.0):
    s = fwhm / (2 * math.sqrt(2 * math.log(2)))
    lam = np.linspace(lam0 - 12 * s, lam0 + 12 * s, 4001)
    return lam, scale * np.exp(-0.5 * ((lam - lam0) / s) ** 2)


def test_fuchtbauer_ladenburg_narrow_line_integral():
    # Aull & Jenssen, IEEE JQE 18, 925 (1982): for a narrow line
    # ∫ sigma_e dnu = lambda0² / (8 pi n² tau_rad); integrated with scipy's trapezoid rule
    lam0, n, tau = 1030e-9, 1.82, 0.95e-3
    lam, spec = _gaussian_line(lam0)
    sigma = physics.fuchtbauer_ladenburg(lam, spec, n, tau)
    integral_over_nu = trapezoid(sigma * C / lam**2, lam)  # dnu = c / lambda² dlambda
    assert integral_over_nu == pytest.approx(lam0**2 / (8 * math.pi * n**2 * tau), rel=1e-3)


def test_fuchtbauer_ladenburg_ignores_the_scale_and_follows_branching_and_lambda5():
    # Payne et al. (1992), beta-ratio form: sigma_e ∝ beta lambda^5 I(lambda), normalised
    lam, spec = _gaussian_line(scale=1.0)
    ref = physics.fuchtbauer_ladenburg(lam, spec, 1.8, 1e-3)
    np.testing.assert_allclose(physics.fuchtbauer_ladenburg(lam, 1e6 * spec, 1.8, 1e-3), ref, rtol=1e-12)
    np.testing.assert_allclose(
        physics.fuchtbauer_ladenburg(lam, spec, 1.8, 1e-3, branching_ratio=0.25), 0.25 * ref, rtol=1e-12
    )
    flat = physics.fuchtbauer_ladenburg(lam, np.ones_like(lam), 1.8, 1e-3)
    assert flat[-1] / flat[0] == pytest.approx((lam[-1] / lam[0]) ** 5, rel=1e-12)


# --- Frantz-Nodvik -------------------------------------------------------------------------


def test_frantz_nodvik_small_input_gives_small_signal_gain():
    # Frantz & Nodvik, J. Appl. Phys. 34, 2346 (1963): F_out -> G0 F_in as F_in -> 0
    for g0 in (0.2, 3.0, 1e3):
        f_in = 1e-9 * 6.7e3
        assert physics.frantz_nodvik_output(f_in, 6.7e3, g0) / f_in == pytest.approx(g0, rel=1e-6)


def test_frantz_nodvik_large_input_adds_f_sat_ln_g0():
    # Frantz & Nodvik 1963: deep saturation extracts F_sat ln G0 whatever F_in is,
    # including inputs where exp(F_in / F_sat) overflows float64
    f_sat, g0 = 6.7e3, 20.0
    for ratio in (40.0, 1e3, 1e6):
        f_in = ratio * f_sat
        out = physics.frantz_nodvik_output(f_in, f_sat, g0)
        assert out == pytest.approx(f_in + f_sat * math.log(g0), rel=1e-14)


def test_frantz_nodvik_matches_integration_of_the_amplifier_equation():
    # Frantz & Nodvik 1963 / Siegman, Lasers, ch. 10: a short pulse obeys
    # dF/dz = g0 F_sat (1 - exp(-F / F_sat)); integrate it with scipy's solve_ivp
    f_sat, g_coef, length = 6.7e3, 150.0, 0.02  # G0 = exp(3)
    for f_in in (1.0, 1e3, 2e4, 1e5):
        sol = solve_ivp(
            lambda z, f: g_coef * f_sat * -np.expm1(-f / f_sat),
            (0.0, length),
            [f_in],
            rtol=1e-11,
            atol=1e-12 * f_in,
        )
        expected = sol.y[0, -1]
        got = physics.frantz_nodvik_output(f_in, f_sat, math.exp(g_coef * length))
        assert got == pytest.approx(expected, rel=1e-7)


def test_frantz_nodvik_small_signal_gain_inverts_output_on_a_grid():
    # Frantz & Nodvik 1963: the relation is solvable for G0
    f_sat = 6.7e3
    ratios = np.logspace(-8, 3, 23)
    gains = np.logspace(-2, 4, 13)
    x, g = np.meshgrid(ratios, gains)
    f_out = physics.frantz_nodvik_output(x * f_sat, f_sat, g)
    back = physics.frantz_nodvik_small_signal_gain(x * f_sat, f_out, f_sat)
    np.testing.assert_allclose(back, g, rtol=1e-8)


def test_frantz_nodvik_correction_recovers_g0_from_a_saturated_pulse():
    # Frantz & Nodvik 1963: a pulse at F_in = F_sat measures less gain than G0
    f_sat, g0 = 6.7e3, 8.0
    f_out = physics.frantz_nodvik_output(f_sat, f_sat, g0)
    g_meas = f_out / f_sat
    assert g_meas < g0
    assert physics.frantz_nodvik_correction(g_meas, f_sat, f_sat) == pytest.approx(g0, rel=1e-12)


def test_probe_weakness_is_intensity_over_saturation():
    # Siegman sec. 7.5: saturation sets in at I ~ I_sat (common practice, no source for the ratio)
    assert physics.probe_weakness(290.0, 2.9e7) == pytest.approx(1e-5, rel=1e-14)


# --- rate equations -----------------------------------------------------------------------

# a Yb-like quasi-three-level medium (values invented for the tests, realistic magnitudes)
PUMP = {"wavelength": 940e-9, "sigma_a": 0.8e-24, "sigma_e": 0.16e-24}
PROBE = {"wavelength": 1030e-9, "sigma_a": 0.012e-24, "sigma_e": 2.0e-24}
TAU, N_TOTAL = 0.95e-3, 1.4e26


def _rhs(i_pump, i_probe):
    """dN2/dt written out from Koechner sec. 1.4, photon fluxes from scipy.constants."""
    phi_p = i_pump * PUMP["wavelength"] / (H * C)
    phi_s = i_probe * PROBE["wavelength"] / (H * C)

    def f(_t, y):
        n2 = y[0]
        n1 = N_TOTAL - n2
        return [
            (PUMP["sigma_a"] * n1 - PUMP["sigma_e"] * n2) * phi_p
            + (PROBE["sigma_a"] * n1 - PROBE["sigma_e"] * n2) * phi_s
            - n2 / TAU
        ]

    return f, phi_p, phi_s


def _step(n2, phi_p, phi_s, dt):
    return physics.rate_equation_step(
        n2,
        N_TOTAL,
        phi_p,
        PUMP["sigma_a"],
        PUMP["sigma_e"],
        TAU,
        dt,
        probe_flux=phi_s,
        sigma_as=PROBE["sigma_a"],
        sigma_es=PROBE["sigma_e"],
    )


def test_rate_equation_step_matches_solve_ivp_with_pump_and_probe():
    # reference integrator: scipy.integrate.solve_ivp on the rate equation (Koechner sec. 1.4)
    f, phi_p, phi_s = _rhs(3e8, 5e7)
    times = np.linspace(0.0, 4e-3, 9)
    sol = solve_ivp(
        f,
        (0.0, times[-1]),
        [0.02 * N_TOTAL],
        t_eval=times,
        method="DOP853",
        rtol=1e-12,
        atol=1e-6 * N_TOTAL * 1e-9,
    )
    got = _step(0.02 * N_TOTAL, phi_p, phi_s, times)
    np.testing.assert_allclose(got, sol.y[0], rtol=1e-6)


def test_decay_with_zero_pump_is_exactly_exponential():
    # Svelto sec. 2.6: with no pump, N2(t) = N2(0) exp(-t / tau); also solve_ivp as reference
    f, _, _ = _rhs(0.0, 0.0)
    times = np.linspace(0.0, 5 * TAU, 11)
    n0 = 0.3 * N_TOTAL
    got = _step(n0, 0.0, 0.0, times)
    np.testing.assert_allclose(got, n0 * np.exp(-times / TAU), rtol=1e-13)
    sol = solve_ivp(
        f, (0.0, times[-1]), [n0], t_eval=times, method="DOP853", rtol=1e-12, atol=1e-15 * N_TOTAL
    )
    np.testing.assert_allclose(got, sol.y[0], rtol=1e-6)


def test_long_step_converges_to_the_steady_state():
    # Koechner sec. 1.4: the steady state is where dN2/dt = 0; found here with scipy's brentq
    i_pump, i_probe = 1e8, 2e6
    f, phi_p, phi_s = _rhs(i_pump, i_probe)
    root = brentq(lambda n2: f(0.0, [n2])[0], 0.0, N_TOTAL, xtol=1e-6, rtol=1e-14)
    beta = physics.steady_state_fraction(
        i_pump,
        PUMP["wavelength"],
        PUMP["sigma_a"],
        PUMP["sigma_e"],
        TAU,
        probe_intensity=i_probe,
        probe_wavelength=PROBE["wavelength"],
        sigma_e_probe=PROBE["sigma_e"],
        sigma_a_probe=PROBE["sigma_a"],
    )
    assert beta * N_TOTAL == pytest.approx(root, rel=1e-10)
    assert _step(0.0, phi_p, phi_s, 100 * TAU) == pytest.approx(beta * N_TOTAL, rel=1e-12)


def test_steady_state_fraction_equals_saturation_form():
    # Koechner sec. 1.4: beta = beta_max (I / I_sat,p) / (1 + I / I_sat,p) for a weak probe
    beta_max, i_sat = physics.pump_saturation_parameters(
        PUMP["wavelength"], PUMP["sigma_a"], PUMP["sigma_e"], TAU
    )
    assert beta_max == pytest.approx(0.8 / 0.96, rel=1e-14)
    intensities = np.logspace(5, 10, 11)
    beta = physics.steady_state_fraction(
        intensities, PUMP["wavelength"], PUMP["sigma_a"], PUMP["sigma_e"], TAU
    )
    np.testing.assert_allclose(beta, physics.beta_of_pump(intensities, beta_max, i_sat), rtol=1e-12)


def test_pump_rate_is_sigma_times_photon_flux():
    # Koechner sec. 1.3: W_p = sigma_a I / (h nu), scipy.constants
    expected = 0.8e-24 * 1e7 * 940e-9 / (H * C)
    assert physics.pump_rate(1e7, 940e-9, 0.8e-24) == pytest.approx(expected, rel=1e-14)


def test_transparency_pump_intensity_reaches_the_probe_transparency():
    # Koechner sec. 1.4: pump needed for transparency at the probe, beta = beta_tr
    beta_tr = physics.transparency_fraction(PROBE["sigma_e"], PROBE["sigma_a"])
    i_tr = physics.transparency_pump_intensity(
        PUMP["wavelength"], PUMP["sigma_a"], PUMP["sigma_e"], TAU, beta_tr
    )
    beta = physics.steady_state_fraction(i_tr, PUMP["wavelength"], PUMP["sigma_a"], PUMP["sigma_e"], TAU)
    assert beta == pytest.approx(beta_tr, rel=1e-12)


def test_transparency_pump_intensity_unreachable_is_inf_and_zero_is_zero():
    # Koechner sec. 1.4: a pump cannot excite beyond sigma_ap / (sigma_ap + sigma_ep)
    args = (PUMP["wavelength"], PUMP["sigma_a"], PUMP["sigma_e"], TAU)
    assert physics.transparency_pump_intensity(*args, 0.9) == math.inf
    assert physics.transparency_pump_intensity(*args, 0.8 / 0.96) == math.inf
    assert physics.transparency_pump_intensity(*args, 0.0) == 0.0


def test_probe_needs_its_wavelength():
    # argument validation (common practice, no source)
    with pytest.raises(ValueError, match=r"^probe_wavelength"):
        physics.steady_state_fraction(1e7, 940e-9, 1e-24, 0.0, 1e-3, probe_intensity=1.0)


# --- argument validation ------------------------------------------------------------------

BAD_CALLS = [
    ("wavelength", lambda: physics.photon_energy(0.0)),
    ("wavelength", lambda: physics.photon_energy([1e-6, -1e-6])),
    ("wavelength", lambda: physics.photon_energy(float("nan"))),
    ("wavelength", lambda: physics.photon_energy("red")),
    ("sigma_e", lambda: physics.saturation_intensity(1e-6, -1e-24, 0.0, 1e-3)),
    ("sigma_a", lambda: physics.transparency_fraction(1e-24, -1e-24)),
    ("sigma_e, sigma_a", lambda: physics.saturation_fluence(1e-6, 0.0, 0.0)),
    ("tau", lambda: physics.saturation_intensity(1e-6, 1e-24, 0.0, 0.0)),
    ("length", lambda: physics.excited_density_from_ln_ratio(0.1, 1e-24, 0.0, -1.0)),
    ("ln_ratio", lambda: physics.excited_density_from_ln_ratio(float("inf"), 1e-24, 0.0, 1e-3)),
    ("n2", lambda: physics.ln_ratio_from_excited_density(float("nan"), 1e-24, 0.0, 1e-3)),
    ("n_total", lambda: physics.net_gain(0.1, 1e-24, -1.0, 1e-3)),
    ("linear", lambda: physics.gain_db(0.0)),
    ("epsilon", lambda: physics.mccumber_emission(1e-6, 1e-24, -1.0, 300.0)),
    ("temperature", lambda: physics.mccumber_absorption(1e-6, 1e-24, 1e-19, 0.0)),
    ("wavelength", lambda: physics.fuchtbauer_ladenburg([2e-6, 1e-6], [1.0, 1.0], 1.5, 1e-3)),
    ("intensity", lambda: physics.fuchtbauer_ladenburg([1e-6, 2e-6], [0.0, 0.0], 1.5, 1e-3)),
    ("intensity", lambda: physics.fuchtbauer_ladenburg([1e-6, 2e-6], [1.0], 1.5, 1e-3)),
    ("refractive_index", lambda: physics.fuchtbauer_ladenburg([1e-6, 2e-6], [1.0, 1.0], 0.0, 1e-3)),
    (
        "branching_ratio",
        lambda: physics.fuchtbauer_ladenburg([1e-6, 2e-6], [1.0, 1.0], 1.5, 1e-3, branching_ratio=1.5),
    ),
    ("f_in", lambda: physics.frantz_nodvik_output(-1.0, 1.0, 2.0)),
    ("g0", lambda: physics.frantz_nodvik_output(1.0, 1.0, 0.0)),
    ("f_out", lambda: physics.frantz_nodvik_small_signal_gain(1.0, 0.0, 1.0)),
    ("f_sat", lambda: physics.frantz_nodvik_small_signal_gain(1.0, 1.0, 0.0)),
    ("g_meas", lambda: physics.frantz_nodvik_correction(-2.0, 1.0, 1.0)),
    ("i_sat", lambda: physics.probe_weakness(1.0, 0.0)),
    ("pump_wavelength", lambda: physics.steady_state_fraction(1.0, -1.0, 1e-24, 0.0, 1e-3)),
    ("pump_intensity", lambda: physics.steady_state_fraction(-1.0, 1e-6, 1e-24, 0.0, 1e-3)),
    ("beta_target", lambda: physics.transparency_pump_intensity(1e-6, 1e-24, 0.0, 1e-3, 1.5)),
    ("beta_max", lambda: physics.beta_of_pump(1.0, 2.0, 1.0)),
    ("p_sat", lambda: physics.beta_of_pump(1.0, 0.5, 0.0)),
    ("n2", lambda: physics.rate_equation_step(2e26, 1e26, 0.0, 1e-24, 0.0, 1e-3, 1e-3)),
    ("dt", lambda: physics.rate_equation_step(0.0, 1e26, 0.0, 1e-24, 0.0, 1e-3, -1e-3)),
    ("sigma_es", lambda: physics.rate_equation_step(0.0, 1e26, 0.0, 1e-24, 0.0, 1e-3, 1e-3, sigma_es=-1.0)),
]


@pytest.mark.parametrize("name, call", BAD_CALLS, ids=[f"{i}-{n}" for i, (n, _) in enumerate(BAD_CALLS)])
def test_bad_arguments_raise_value_error_naming_the_argument(name, call):
    # common practice, no source: ValueError whose message starts with the argument's name
    with pytest.raises(ValueError) as info:
        call()
    assert str(info.value).startswith(f"{name}:")
