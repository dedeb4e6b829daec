"""Cross-sections from a wavelength scan: Beer-Lambert with Fresnel loss, emission from ln R,
the gain cross-section, McCumber reciprocity with correlated errors.

Sources: Fresnel reflectance at normal incidence ((n - 1) / (n + 1))^2 (M. Born and E. Wolf,
*Principles of Optics*, 7th ed., sec. 1.5.3); Beer-Lambert T = exp(-sigma_a N L) and the
gain cross-section beta sigma_e - (1 - beta) sigma_a, zero at the transparency fraction
sigma_a / (sigma_a + sigma_e) (O. Svelto, *Principles of Lasers*, 5th ed., ch. 2 and 7);
McCumber sigma_e / sigma_a = exp((E_zl - h nu) / kT) (Phys. Rev. 134, A299 (1964)), here the
simulator's invented spectrum, which is built to obey it (simulated_instruments/lineshape.py,
not the code under test); variance of a difference of correlated quantities (GUM, JCGM
100:2008, eq. 16).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from bench.physics import gain_spectrum as gs
from simulated_instruments.lineshape import probe_cross_sections, zero_line_wavelength

N, L = 2.0e26, 5e-3  # m^-3, m
SA0, SE0, LAM0, T = 1.2e-25, 2.2e-24, 1030e-9, 295.0


def test_beer_lambert_with_the_fresnel_loss_of_two_faces_of_n_2():
    r = ((2.0 - 1.0) / (2.0 + 1.0)) ** 2  # 1/9 (Born and Wolf)
    ln_t = 2.0 * math.log(1.0 - r) - SA0 * N * L
    assert gs.absorption_from_transmission(ln_t, N, L, r) == pytest.approx(SA0, rel=1e-12)
    # the sample-out level from a reading with the sample in: ln S - ln T
    assert gs.empty_beam_ln_level(-1.0, SA0, N, L, r) == pytest.approx(-1.0 - ln_t, rel=1e-12)
    with pytest.raises(ValueError, match="reflectance"):
        gs.absorption_from_transmission(ln_t, N, L, 1.0)


def test_emission_from_ln_ratio_inverts_the_handbook_relation():
    beta = 0.3
    ln_r = (SE0 + SA0) * beta * N * L  # Svelto: ln R = (sigma_e + sigma_a) L <N2>
    assert gs.emission_from_ln_ratio(ln_r, beta, SA0, N, L) == pytest.approx(SE0, rel=1e-12)
    with pytest.raises(ValueError, match="beta"):
        gs.emission_from_ln_ratio(ln_r, 0.0, SA0, N, L)


def test_gain_cross_section_is_zero_at_transparency_and_sigma_e_at_full_inversion():
    b_tr = SA0 / (SA0 + SE0)
    assert gs.gain_cross_section(SE0, SA0, b_tr) == pytest.approx(0.0, abs=1e-40)
    assert gs.gain_cross_section(SE0, SA0, 1.0) == pytest.approx(SE0)
    assert gs.gain_cross_section(SE0, SA0, 0.0) == pytest.approx(-SA0)
    family = gs.gain_cross_section(np.array([SE0, 2 * SE0])[None, :], SA0, np.array([0.0, 0.5, 1.0])[:, None])
    assert family.shape == (3, 2)
    with pytest.raises(ValueError, match="beta"):
        gs.gain_cross_section(SE0, SA0, 1.5)


def test_reciprocity_of_the_simulators_spectrum_and_a_violation_is_seen():
    lam_zl = zero_line_wavelength(LAM0, SA0, SE0, T)
    eps = constants.h * constants.c / lam_zl
    lam = np.linspace(1005e-9, 1055e-9, 11)
    xs = np.array([probe_cross_sections(x, LAM0, SA0, SE0, T) for x in lam])
    sa, se = xs[:, 0], xs[:, 1]
    ok = gs.mccumber_reciprocity(lam, se, sa, 0.01 * se, 0.01 * sa, eps, T)
    assert np.max(np.abs(ok.deviation)) < 1e-9
    bad = gs.mccumber_reciprocity(lam, 1.1 * se, sa, 0.01 * se, 0.01 * sa, eps, T)
    assert np.allclose(bad.deviation, math.log(1.1), atol=1e-9)
    assert np.all(np.abs(bad.z) > 5)
    # the far wings: |h nu - E_zl| > 3 kT; at 1005 nm the zero line is near, at 1055 nm far
    x = (eps - constants.h * constants.c / lam) / (constants.k * T)
    assert list(ok.far) == list(np.abs(x) > 3.0)


def test_correlation_enters_the_uncertainty_of_the_ratio():
    # var(ln e - ln a) = r_e^2 + r_a^2 - 2 rho r_e r_a (GUM eq. 16), relative errors r
    c = gs.mccumber_reciprocity(LAM0, SE0, SA0, 0.02 * SE0, 0.01 * SA0, 1.9e-19, T, correlation=-1.0)
    assert c.sigma[0] == pytest.approx(0.03, rel=1e-9)
    c = gs.mccumber_reciprocity(LAM0, SE0, SA0, 0.02 * SE0, 0.02 * SA0, 1.9e-19, T, correlation=1.0)
    assert c.sigma[0] == pytest.approx(0.0, abs=1e-12)  # one derived from the other: no test
