"""Relations between cross-sections and spectra: McCumber (emission <-> absorption) and
Füchtbauer-Ladenburg (emission from a fluorescence spectrum).

Pure functions of numbers, SI units, vectorised over numpy arrays; see `bench.physics` for the
conventions and the words used.
"""

from __future__ import annotations

import math

import numpy as np

from bench.physics.arguments import (
    as_result,
    check_nonnegative,
    check_positive,
    checked_photon_energy,
)
from bench.physics.constants import K_B, C


def _mccumber_exponent(wavelength, epsilon, temperature):
    e = check_positive(epsilon, "epsilon", " (an energy in J)")
    t = check_positive(temperature, "temperature", " (in K)")
    return (e - checked_photon_energy(wavelength, "wavelength")) / (K_B * t)


def mccumber_emission(wavelength, sigma_a, epsilon, temperature):
    """Emission cross-section from absorption, ``sigma_a exp((epsilon - h nu) / kT)``.

    Parameters
    ----------
    wavelength : float or array_like
        Wavelength in m.
    sigma_a : float or array_like
        Absorption cross-section in m².
    epsilon : float or array_like
        The net free energy needed to excite one ion at temperature T, in J (at the usual
        level of approximation, the zero-line energy between the lowest Stark levels).
    temperature : float or array_like
        Temperature in K.

    Returns
    -------
    numpy.float64 or numpy.ndarray
        sigma_e in m². Far on the long-wavelength side at low temperature the factor
        overflows and the result is ``inf`` (where ``sigma_a`` is zero it stays zero).

    References
    ----------
    .. [1] D. E. McCumber, "Einstein relations connecting broadband emission and absorption
       spectra", Phys. Rev. 136, A954 (1964).
    .. [2] S. A. Payne, L. L. Chase, L. K. Smith, W. L. Kway and W. F. Krupke, "Infrared
       cross-section measurements for crystals doped with Er3+, Tm3+, and Ho3+",
       IEEE J. Quantum Electron. 28, 2619 (1992).
    """
    sa = check_nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    x = _mccumber_exponent(wavelength, epsilon, temperature)
    with np.errstate(over="ignore", invalid="ignore"):
        se = np.where(sa > 0, sa * np.exp(x), 0.0)
    return as_result(se)


def mccumber_absorption(wavelength, sigma_e, epsilon, temperature):
    """Absorption cross-section from emission, ``sigma_e exp((h nu - epsilon) / kT)``.

    The inverse of `mccumber_emission`; same parameters with ``sigma_e`` given.

    References
    ----------
    .. [1] D. E. McCumber, Phys. Rev. 136, A954 (1964).
    .. [2] S. A. Payne et al., IEEE J. Quantum Electron. 28, 2619 (1992).
    """
    se = check_nonnegative(sigma_e, "sigma_e", " (a cross-section)")
    x = _mccumber_exponent(wavelength, epsilon, temperature)
    with np.errstate(over="ignore", invalid="ignore"):
        sa = np.where(se > 0, se * np.exp(-x), 0.0)
    return as_result(sa)


def _trapezoid(y: np.ndarray, x: np.ndarray) -> float:
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(x)))


def fuchtbauer_ladenburg(wavelength, intensity, refractive_index, radiative_lifetime, *, branching_ratio=1.0):
    """Emission cross-section spectrum from a fluorescence spectrum (Füchtbauer-Ladenburg).

    ``sigma_e(lambda) = beta lambda^5 I(lambda) / (8 pi n^2 c tau_rad ∫ lambda I(lambda) dlambda)``,
    the form for a spectrum ``I(lambda)`` recorded per unit wavelength, normalised so that the
    result does not depend on the scale of ``I``.

    Parameters
    ----------
    wavelength : array_like
        Wavelengths in m, 1-d, strictly increasing, at least two.
    intensity : array_like
        Fluorescence spectral intensity per unit wavelength, any scale, zero or positive,
        same shape as ``wavelength``, not all zero.
    refractive_index : float
        Refractive index of the host at the emission, positive.
    radiative_lifetime : float
        Radiative lifetime of the emitting manifold in s.
    branching_ratio : float, optional
        Fraction of radiative decays that end in the terminal manifold of this band, in (0, 1].

    Returns
    -------
    numpy.ndarray
        sigma_e in m² at each wavelength.

    References
    ----------
    .. [1] B. F. Aull and H. P. Jenssen, "Vibronic interactions in Nd:YAG resulting in
       nonreciprocity of absorption and stimulated emission cross sections",
       IEEE J. Quantum Electron. 18, 925 (1982).
    .. [2] S. A. Payne et al., IEEE J. Quantum Electron. 28, 2619 (1992).
    """
    lam = check_positive(wavelength, "wavelength")
    if lam.ndim != 1 or lam.size < 2:
        raise ValueError(f"wavelength: must be a 1-d array of at least 2 values, got shape {lam.shape}")
    if np.any(np.diff(lam) <= 0):
        raise ValueError("wavelength: must be strictly increasing")
    spec = check_nonnegative(intensity, "intensity")
    if spec.shape != lam.shape:
        raise ValueError(f"intensity: shape {spec.shape} does not match wavelength {lam.shape}")
    n = check_positive(refractive_index, "refractive_index")
    tau = check_positive(radiative_lifetime, "radiative_lifetime", " (a lifetime)")
    beta = check_positive(branching_ratio, "branching_ratio")
    if np.any(beta > 1):
        raise ValueError(f"branching_ratio: must be at most 1, got {float(np.max(beta))!r}")
    norm = _trapezoid(lam * spec, lam)
    if not norm > 0:
        raise ValueError("intensity: must not be zero everywhere")
    return as_result(beta * lam**5 * spec / (8.0 * math.pi * n**2 * C * tau * norm))
