"""Cross-section spectra from a probe-wavelength scan: Beer-Lambert absorption, emission from the
pump-induced ln R, the gain cross-section family, and a McCumber reciprocity check.

Pure functions of numbers, SI units, vectorised over numpy arrays (see `bench.physics`).

Model (quasi-three-level, two manifolds; O. Svelto, *Principles of Lasers*, 5th ed., 2010,
ch. 2 and 7): the unpumped sample transmits ``T = (1 - R_F)^2 exp(-sigma_a N L)`` (Beer-Lambert,
two uncoated faces of Fresnel reflectance ``R_F``, multiple reflections neglected); the pump
raises the excited fraction by ``beta`` and the probe's transmission by
``ln R = (sigma_e + sigma_a) beta N L``; the net gain cross-section at excited fraction beta is
``sigma_g = beta sigma_e - (1 - beta) sigma_a``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bench.physics.arguments import as_result, check_positive, check_real, checked_photon_energy
from bench.physics.constants import K_B

#: |h nu - E_zl| / kT beyond which McCumber's exponential amplifies errors (a relative error of
#: kT in the zero line, or of the weaker cross-section, grows by e^x): a warning threshold of
#: gainbench's (common practice that reciprocity is unreliable in the far wings, Payne et al. 1992).
FAR_FROM_ZERO_LINE = 3.0


def absorption_from_transmission(ln_transmission, n_total, length, reflectance=0.0):
    """``sigma_a = -(ln T - 2 ln(1 - R_F)) / (N L)``: Beer-Lambert corrected for the Fresnel loss
    of two faces.

    Parameters
    ----------
    ln_transmission : float or array_like
        ln of the measured single-pass transmission of the unpumped sample (sample in over
        sample out).
    n_total, length : float
        Dopant density (m⁻³) and sample length (m).
    reflectance : float
        Fresnel reflectance per face (`bench.physics.fresnel_reflectance`), 0 for coated faces.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.4 (absorption).
    .. [2] M. Born and E. Wolf, *Principles of Optics*, 7th ed., 1999, sec. 1.5.3 (Fresnel).
    """
    lnt = check_real(ln_transmission, "ln_transmission")
    nl = check_positive(n_total, "n_total") * check_positive(length, "length")
    r = check_real(reflectance, "reflectance")
    if np.any((r < 0) | (r >= 1)):
        raise ValueError(f"reflectance: must be in [0, 1), got {reflectance!r}")
    return as_result(-(lnt - 2.0 * np.log1p(-r)) / nl)


def empty_beam_ln_level(ln_s_sample, sigma_a, n_total, length, reflectance=0.0):
    """ln of the probe/reference ratio with the sample out, from one with the sample in at a
    wavelength where ``sigma_a`` is known: ``ln S_empty = ln S - ln T`` (Beer-Lambert, as
    `absorption_from_transmission`)."""
    ln_s = check_real(ln_s_sample, "ln_s_sample")
    sa = check_real(sigma_a, "sigma_a")
    nl = check_positive(n_total, "n_total") * check_positive(length, "length")
    r = check_real(reflectance, "reflectance")
    if np.any((r < 0) | (r >= 1)):
        raise ValueError(f"reflectance: must be in [0, 1), got {reflectance!r}")
    return as_result(ln_s - (2.0 * np.log1p(-r) - sa * nl))


def emission_from_ln_ratio(ln_ratio, beta, sigma_a, n_total, length):
    """``sigma_e = ln R / (beta N L) - sigma_a``: the emission cross-section from the pump-induced
    ln R at a known pump-induced excited fraction ``beta`` (Svelto, ch. 7; the relation
    ``ln R = (sigma_e + sigma_a) L <N2>`` of `bench.physics.ln_ratio_from_excited_density`)."""
    lnr = check_real(ln_ratio, "ln_ratio")
    b = check_positive(beta, "beta")
    nl = check_positive(n_total, "n_total") * check_positive(length, "length")
    return as_result(lnr / (b * nl) - check_real(sigma_a, "sigma_a"))


def gain_cross_section(sigma_e, sigma_a, beta):
    """``sigma_g = beta sigma_e - (1 - beta) sigma_a`` (m²); broadcasts, e.g. a column of betas
    against a row of wavelengths gives the family of gain curves (Svelto, sec. 2.7 and ch. 7).

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010.
    .. [2] S. A. Payne et al., "Infrared cross-section measurements for crystals doped with
       Er3+, Tm3+, and Ho3+", IEEE J. Quantum Electron. 28, 2619 (1992).
    """
    b = check_real(beta, "beta")
    if np.any((b < 0) | (b > 1)):
        raise ValueError(f"beta: must be in [0, 1], got {beta!r}")
    return as_result(b * check_real(sigma_e, "sigma_e") - (1.0 - b) * check_real(sigma_a, "sigma_a"))


@dataclass(frozen=True)
class ReciprocityCheck:
    """McCumber's check at each wavelength: ``d = ln(sigma_e / sigma_a) - (E_zl - h nu) / kT``
    (zero where reciprocity holds), its standard uncertainty, ``z = d / sigma``, the exponent
    ``x = (E_zl - h nu) / kT``, and where |x| is beyond `FAR_FROM_ZERO_LINE`."""

    deviation: np.ndarray
    sigma: np.ndarray
    z: np.ndarray
    exponent: np.ndarray
    far: np.ndarray


def mccumber_reciprocity(
    wavelength,
    sigma_e,
    sigma_a,
    u_sigma_e,
    u_sigma_a,
    epsilon,
    temperature,
    correlation=0.0,
    u_epsilon=0.0,
) -> ReciprocityCheck:
    """Check measured ``sigma_e``, ``sigma_a`` against the McCumber relation
    ``sigma_e / sigma_a = exp((epsilon - h nu) / kT)``.

    The uncertainty of ``ln(sigma_e / sigma_a)`` is ``u_e^2 / s_e^2 + u_a^2 / s_a^2 - 2 rho
    u_e u_a / (s_e s_a)`` (GUM, JCGM 100:2008, sec. 5.2, correlated inputs) with ``rho`` the
    correlation coefficient of the two: negative where sigma_e was derived from ln R less
    sigma_a (so an error of sigma_a moves sigma_e the other way), +1 where one was computed
    from the other by McCumber (then the check says nothing and ``d`` is zero by construction).
    ``u_epsilon`` (J) adds ``u_epsilon / kT`` in quadrature.

    References
    ----------
    .. [1] D. E. McCumber, "Einstein relations connecting broadband emission and absorption
       spectra", Phys. Rev. 134, A299 (1964).
    .. [2] S. A. Payne, L. L. Chase, L. K. Smith, W. L. Kway and W. F. Krupke, IEEE J. Quantum
       Electron. 28, 2619 (1992) (reciprocity applied to measured spectra).
    """
    e_nu = checked_photon_energy(wavelength, "wavelength")
    se = check_positive(sigma_e, "sigma_e")
    sa = check_positive(sigma_a, "sigma_a")
    ue = check_real(u_sigma_e, "u_sigma_e")
    ua = check_real(u_sigma_a, "u_sigma_a")
    rho = check_real(correlation, "correlation")
    if np.any(np.abs(rho) > 1):
        raise ValueError(f"correlation: must be in [-1, 1], got {correlation!r}")
    kt = K_B * check_positive(temperature, "temperature")
    x = (check_positive(epsilon, "epsilon") - e_nu) / kt
    d = np.log(se / sa) - x
    var = (ue / se) ** 2 + (ua / sa) ** 2 - 2.0 * rho * (ue / se) * (ua / sa)
    var = np.maximum(var, 0.0) + (check_real(u_epsilon, "u_epsilon") / kt) ** 2
    s = np.sqrt(var)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(s > 0, d / s, np.where(d == 0, 0.0, np.inf))
    return ReciprocityCheck(
        np.atleast_1d(d),
        np.atleast_1d(s),
        np.atleast_1d(z),
        np.atleast_1d(x),
        np.atleast_1d(np.abs(x) > FAR_FROM_ZERO_LINE),
    )
