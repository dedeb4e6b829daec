"""From the probe ratio to the inversion and the gain: ln R <-> <N2>, net gain, gain coefficient,
and their units (dB, per cm).

Pure functions of numbers, SI units, vectorised over numpy arrays; see `bench.physics` for the
conventions and the words used.
"""

from __future__ import annotations

import math

import numpy as np

from bench.physics.arguments import (
    as_result,
    check_cross_sections,
    check_nonnegative,
    check_positive,
    check_real,
)


def excited_density_from_ln_ratio(ln_ratio, sigma_e, sigma_a, length):
    """Length-averaged excited density ``<N2> = ln R / ((sigma_e + sigma_a) L)`` in m⁻³.

    With the pump on, the probe's absorption coefficient changes from ``-sigma_a N_total`` to
    ``sigma_e N2 - sigma_a (N_total - N2)``; the difference integrated over the length is
    ``(sigma_e + sigma_a) L <N2>``, which is ``ln R``.

    Parameters
    ----------
    ln_ratio : float or array_like
        ln of pumped over unpumped normalised transmission; any finite value (noise may make
        it negative).
    sigma_e, sigma_a : float or array_like
        Cross-sections at the probe wavelength, m².
    length : float or array_like
        Sample length in m, positive.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    .. [2] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.8 (absorption
       and gain coefficients).
    """
    r = check_real(ln_ratio, "ln_ratio")
    _, _, total = check_cross_sections(sigma_e, sigma_a)
    ell = check_positive(length, "length")
    return as_result(r / (total * ell))


def ln_ratio_from_excited_density(n2, sigma_e, sigma_a, length):
    """The inverse of `excited_density_from_ln_ratio`: ``ln R = (sigma_e + sigma_a) L <N2>``.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    n = check_real(n2, "n2")
    _, _, total = check_cross_sections(sigma_e, sigma_a)
    ell = check_positive(length, "length")
    return as_result(n * total * ell)


def net_gain(ln_ratio, sigma_a, n_total, length):
    """Net small-signal single-pass gain ``G = R exp(-sigma_a N_total L)`` (linear).

    ``R`` is the pumped/unpumped transmission ratio; multiplying by the unpumped
    (Beer-Lambert) transmission gives the probe's net gain through the pumped sample.

    Parameters
    ----------
    ln_ratio : float or array_like
        ln R.
    sigma_a : float or array_like
        Absorption cross-section at the probe, m².
    n_total : float or array_like
        Dopant density, m⁻³.
    length : float or array_like
        Sample length, m.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    r = check_real(ln_ratio, "ln_ratio")
    sa = check_nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    nt = check_nonnegative(n_total, "n_total", " (a density)")
    ell = check_positive(length, "length")
    return as_result(np.exp(r - sa * nt * ell))


def gain_coefficient(n2, n_total, sigma_e, sigma_a):
    """Gain coefficient ``g = sigma_e N2 - sigma_a (N_total - N2)`` in m⁻¹.

    Parameters
    ----------
    n2 : float or array_like
        Excited density, m⁻³ (any finite value: an estimate may be noisy).
    n_total : float or array_like
        Dopant density, m⁻³.
    sigma_e, sigma_a : float or array_like
        Cross-sections at the signal, m².

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.8.
    .. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    n = check_real(n2, "n2")
    nt = check_nonnegative(n_total, "n_total", " (a density)")
    se = check_nonnegative(sigma_e, "sigma_e", " (a cross-section)")
    sa = check_nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    return as_result(se * n - sa * (nt - n))


def ln_gain_to_db(ln_gain):
    """A power gain given by its natural logarithm, in decibels: ``10 log10(e) ln G``.

    Never forms ``G`` itself, so it holds for gains far beyond the range of a float (an
    optically thick sample's ``exp(-sigma_a N L)`` underflows above ``sigma_a N L ~ 745``).

    References
    ----------
    .. [1] IEC 60027-3, *Letter symbols to be used in electrical technology - Part 3:
       Logarithmic and related quantities, and their units* (decibel, neper).
    """
    return as_result(10.0 * math.log10(math.e) * check_real(ln_gain, "ln_gain"))


def fresnel_reflectance(refractive_index):
    """Power reflectance of one uncoated face at normal incidence, ``((n - 1) / (n + 1))^2``.

    Parameters
    ----------
    refractive_index : float or array_like
        Refractive index of the sample (surrounded by air, n = 1), at least 1.

    References
    ----------
    .. [1] M. Born and E. Wolf, *Principles of Optics*, 7th ed., Cambridge University Press,
       1999, sec. 1.5.3 (Fresnel formulae at normal incidence).
    """
    n = check_positive(refractive_index, "refractive_index")
    if np.any(n < 1.0):
        raise ValueError(f"refractive_index: must be at least 1, got {float(np.min(n))!r}")
    return as_result(((n - 1.0) / (n + 1.0)) ** 2)


def gain_db(linear):
    """A linear power gain in decibels, ``10 log10(G)``.

    References
    ----------
    .. [1] IEC 60027-3, *Letter symbols to be used in electrical technology - Part 3:
       Logarithmic and related quantities, and their units*.
    """
    g = check_positive(linear, "linear", " (a linear gain)")
    return as_result(10.0 * np.log10(g))


def per_m_to_per_cm(coefficient):
    """A coefficient in m⁻¹ expressed in cm⁻¹ (divide by 100).

    References
    ----------
    .. [1] BIPM, *The International System of Units (SI)*, 9th ed., 2019 (prefix centi).
    """
    return as_result(check_real(coefficient, "coefficient") / 100.0)


def per_m_to_db_per_cm(coefficient):
    """A gain coefficient in m⁻¹ expressed in dB/cm, ``10 log10(e) g / 100``.

    References
    ----------
    .. [1] IEC 60027-3 (decibel); BIPM SI Brochure, 9th ed., 2019.
    """
    return as_result(10.0 * math.log10(math.e) * check_real(coefficient, "coefficient") / 100.0)


def unpumped_transmission(sigma_a, n_total, length):
    """Beer-Lambert transmission of the unpumped sample, ``exp(-sigma_a N_total L)``.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.4.
    """
    sa = check_nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    nt = check_nonnegative(n_total, "n_total", " (a density)")
    ell = check_positive(length, "length")
    return as_result(np.exp(-sa * nt * ell))


def full_inversion_gain(sigma_e, n_total, length):
    """Single-pass gain with every ion excited, ``exp(sigma_e N_total L)``; the upper bound.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    se = check_nonnegative(sigma_e, "sigma_e", " (a cross-section)")
    nt = check_nonnegative(n_total, "n_total", " (a density)")
    ell = check_positive(length, "length")
    return as_result(np.exp(se * nt * ell))
