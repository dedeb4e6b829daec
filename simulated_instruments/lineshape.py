"""An invented Stark-split spectrum of the demo sample's probe transition, for the QW-1 source.

INVENTED FOR THE DEMO: it describes no real material. The bench file gives the probe
cross-sections at one wavelength (lambda_0); the simulated tunable source reaches
lambda_0 +/- `TUNING_HALF_RANGE` and sees a quasi-three-level ion whose manifolds are split
by the crystal field (Stark levels, energies in `UPPER_LEVELS` and `LOWER_LEVELS`, cm^-1,
invented, magnitudes of a Yb-doped crystal).

* Emission: one line per pair (upper Stark level i -> lower Stark level j), weighted by the
  thermal (Boltzmann) population of level i and an invented strength, each a Voigt profile in
  wavenumber (`scipy.special.voigt_profile`): a Lorentzian of homogeneous half width convolved
  with the Gaussian of inhomogeneous broadening (the site-to-site spread of a crystal or glass).
* Absorption: from emission with the McCumber relation at the zero-line energy ``E_zl`` (the
  separation of the lowest Stark levels of the two manifolds),
  ``sigma_a(nu) = sigma_e(nu) exp((h nu - E_zl) / (k T))``, so the simulated sample obeys
  reciprocity exactly (D. E. McCumber, Phys. Rev. 134, A299 (1964)).
* Scale: ``sigma_e`` is scaled to the bench file's ``probe_emission`` at lambda_0 and ``E_zl``
  is chosen so that the McCumber ratio at lambda_0 is the bench file's
  ``probe_absorption / probe_emission``: at lambda_0 both cross-sections are exactly the bench
  file's, so nothing changes for a run that never tunes the probe.

The zero line (`zero_line_wavelength`) therefore follows from the bench file; for the demo
bench (0.12e-20 / 2.2e-20 cm^2 at 1030 nm, 295 K) it lies near 970 nm.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants
from scipy.special import voigt_profile

TUNING_HALF_RANGE = 30e-9  # m
#: Temperature of the sample when the bench file gives none, K.
DEFAULT_TEMPERATURE = 295.0
#: Stark levels above the lowest of each manifold, cm^-1 (invented).
UPPER_LEVELS = (0.0, 330.0, 610.0)
LOWER_LEVELS = (0.0, 210.0, 455.0, 640.0)
#: Invented relative line strengths, [upper][lower].
STRENGTHS = (
    (1.0, 0.55, 0.75, 1.10),
    (0.45, 0.60, 0.50, 0.35),
    (0.30, 0.25, 0.40, 0.20),
)
#: Inhomogeneous (Gaussian) FWHM and homogeneous (Lorentzian) FWHM of every line, cm^-1.
GAUSS_FWHM = 95.0
LORENTZ_FWHM = 30.0

_HC_CM = constants.h * constants.c * 100.0  # J per cm^-1
_KB = constants.k


def tuning_range(reference_wavelength: float) -> tuple[float, float]:
    """(shortest, longest) probe wavelength of the simulated source, m."""
    return reference_wavelength - TUNING_HALF_RANGE, reference_wavelength + TUNING_HALF_RANGE


def _check(name: str, value: float) -> float:
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"{name}: expected a positive number, got {value!r}")
    return float(value)


def _emission_shape(wavenumber: float, zero_line_cm: float, temperature: float) -> float:
    """Unscaled emission spectrum at ``wavenumber`` (cm^-1)."""
    sigma_g = GAUSS_FWHM / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gamma = 0.5 * LORENTZ_FWHM
    kt_cm = _KB * temperature / _HC_CM
    pops = np.exp(-np.asarray(UPPER_LEVELS) / kt_cm)
    pops /= pops.sum()
    total = 0.0
    for i, eu in enumerate(UPPER_LEVELS):
        for j, el in enumerate(LOWER_LEVELS):
            centre = zero_line_cm + eu - el
            total += pops[i] * STRENGTHS[i][j] * float(voigt_profile(wavenumber - centre, sigma_g, gamma))
    return total


def zero_line_wavelength(
    reference_wavelength: float, sigma_a_ref: float, sigma_e_ref: float, temperature: float
) -> float:
    """Zero-line wavelength (m) at which McCumber gives the reference ratio at lambda_0:
    ``E_zl = h c / lambda_0 - k T ln(sigma_a / sigma_e)``."""
    lam0 = _check("reference_wavelength", reference_wavelength)
    ratio = _check("sigma_a_ref", sigma_a_ref) / _check("sigma_e_ref", sigma_e_ref)
    e_zl = constants.h * constants.c / lam0 - _KB * _check("temperature", temperature) * math.log(ratio)
    return constants.h * constants.c / e_zl


def probe_cross_sections(
    wavelength: float,
    reference_wavelength: float,
    sigma_a_ref: float,
    sigma_e_ref: float,
    temperature: float = DEFAULT_TEMPERATURE,
) -> tuple[float, float]:
    """(sigma_a, sigma_e) in m² at ``wavelength``, exactly the references at lambda_0."""
    lam = _check("wavelength", wavelength)
    lam0 = _check("reference_wavelength", reference_wavelength)
    if lam == lam0:
        return sigma_a_ref, sigma_e_ref
    t = _check("temperature", temperature)
    lam_zl = zero_line_wavelength(lam0, sigma_a_ref, sigma_e_ref, t)
    zl_cm = 0.01 / lam_zl
    scale = sigma_e_ref / _emission_shape(0.01 / lam0, zl_cm, t)
    sigma_e = scale * _emission_shape(0.01 / lam, zl_cm, t)
    # McCumber: sigma_a / sigma_e = exp((E - E_zl) / kT)
    x = (constants.h * constants.c / lam - constants.h * constants.c / lam_zl) / (_KB * t)
    return sigma_e * math.exp(x), sigma_e
