"""An invented probe-wavelength dependence of the cross-sections, for the optional QW-1 source.

INVENTED FOR THE DEMO: it describes no real material. The bench file gives the probe
cross-sections at one wavelength (lambda_0); the simulated tunable source scales them by
Gaussian bands of its own: emission centred 5 nm above lambda_0 (FWHM 40 nm), absorption
centred 20 nm below it (FWHM 30 nm), so that absorption falls and emission peaks as the probe
moves to longer wavelengths, as in a typical quasi-three-level ion. The source tunes over
lambda_0 +/- `TUNING_HALF_RANGE`.
"""

from __future__ import annotations

import math

TUNING_HALF_RANGE = 30e-9  # m
EMISSION_SHIFT, EMISSION_FWHM = 5e-9, 40e-9  # m
ABSORPTION_SHIFT, ABSORPTION_FWHM = -20e-9, 30e-9  # m


def _band(wavelength: float, centre: float, fwhm: float) -> float:
    return math.exp(-4.0 * math.log(2.0) * ((wavelength - centre) / fwhm) ** 2)


def tuning_range(reference_wavelength: float) -> tuple[float, float]:
    """(shortest, longest) probe wavelength of the simulated source, m."""
    return reference_wavelength - TUNING_HALF_RANGE, reference_wavelength + TUNING_HALF_RANGE


def probe_cross_sections(
    wavelength: float, reference_wavelength: float, sigma_a_ref: float, sigma_e_ref: float
) -> tuple[float, float]:
    """(sigma_a, sigma_e) in m² at ``wavelength``, equal to the references at lambda_0."""
    for name, value in (("wavelength", wavelength), ("reference_wavelength", reference_wavelength)):
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name}: expected a positive wavelength in m, got {value!r}")
    e_centre = reference_wavelength + EMISSION_SHIFT
    a_centre = reference_wavelength + ABSORPTION_SHIFT
    scale_e = _band(wavelength, e_centre, EMISSION_FWHM) / _band(
        reference_wavelength, e_centre, EMISSION_FWHM
    )
    scale_a = _band(wavelength, a_centre, ABSORPTION_FWHM) / _band(
        reference_wavelength, a_centre, ABSORPTION_FWHM
    )
    return sigma_a_ref * scale_a, sigma_e_ref * scale_e
