"""Photons, saturation and transparency of the two-manifold medium, and how weak a probe is.

Pure functions of numbers, SI units, vectorised over numpy arrays; see `bench.physics` for the
conventions and the words used.
"""

from __future__ import annotations

from bench.physics.arguments import (
    as_result,
    check_cross_sections,
    check_nonnegative,
    check_positive,
    checked_photon_energy,
)


def photon_energy(wavelength):
    """Energy of one photon, ``h c / lambda``.

    Parameters
    ----------
    wavelength : float or array_like
        Vacuum wavelength in m, positive.

    References
    ----------
    .. [1] A. E. Siegman, *Lasers*, University Science Books, 1986, ch. 1.
    """
    return as_result(checked_photon_energy(wavelength, "wavelength"))


def photon_flux(intensity, wavelength):
    """Photon flux ``I / (h nu)`` of a beam, in photons m⁻² s⁻¹.

    Parameters
    ----------
    intensity : float or array_like
        Intensity in W/m², zero or positive.
    wavelength : float or array_like
        Vacuum wavelength in m, positive.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.4.
    """
    i = check_nonnegative(intensity, "intensity", " (an intensity)")
    return as_result(i / checked_photon_energy(wavelength, "wavelength"))


def transparency_fraction(sigma_e, sigma_a):
    """Excited fraction at which the medium is transparent, ``sigma_a / (sigma_a + sigma_e)``.

    Zero for a four-level medium (``sigma_a = 0``).

    Parameters
    ----------
    sigma_e, sigma_a : float or array_like
        Emission and absorption cross-sections in m², zero or positive, not both zero.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
       (quasi-three-level systems).
    """
    _, sa, total = check_cross_sections(sigma_e, sigma_a)
    return as_result(sa / total)


def saturation_intensity(wavelength, sigma_e, sigma_a, tau):
    """Gain saturation intensity ``h nu / ((sigma_e + sigma_a) tau)`` in W/m².

    Parameters
    ----------
    wavelength : float or array_like
        Signal wavelength in m.
    sigma_e, sigma_a : float or array_like
        Emission and absorption cross-sections at the signal, m².
    tau : float or array_like
        Upper-state lifetime in s.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 4.1.
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 7.5.
    """
    _, _, total = check_cross_sections(sigma_e, sigma_a)
    t = check_positive(tau, "tau", " (a lifetime)")
    return as_result(checked_photon_energy(wavelength, "wavelength") / (total * t))


def saturation_fluence(wavelength, sigma_e, sigma_a):
    """Gain saturation fluence ``h nu / (sigma_e + sigma_a)`` in J/m².

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 4.1.
    .. [2] L. M. Frantz and J. S. Nodvik, "Theory of pulse propagation in a laser amplifier",
       J. Appl. Phys. 34, 2346 (1963).
    """
    _, _, total = check_cross_sections(sigma_e, sigma_a)
    return as_result(checked_photon_energy(wavelength, "wavelength") / total)


def probe_weakness(probe_intensity, i_sat):
    """How strongly a CW probe saturates the gain it measures, ``I_probe / I_sat``.

    The small-signal analysis holds while this is well below 1; the threshold is a setting.

    References
    ----------
    .. [1] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 7.5.
    """
    ip = check_nonnegative(probe_intensity, "probe_intensity", " (an intensity)")
    isat = check_positive(i_sat, "i_sat", " (an intensity)")
    return as_result(ip / isat)
