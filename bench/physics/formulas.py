"""Gain physics of a pumped quasi-three-level medium, in SI units.

Everything here is a pure function of numbers: floats or numpy arrays in, ``numpy.float64``
or arrays out (arrays broadcast against each other). Units are SI throughout: m, m², m⁻³, s,
W/m², J/m², K, J. The model is the two-manifold quasi-three-level medium with an emission
cross-section ``sigma_e`` and an absorption cross-section ``sigma_a`` at each wavelength; a
four-level medium is the case ``sigma_a = 0`` at the signal.

Words used below: ``ln_ratio`` is ln R, R the pumped over unpumped normalised probe
transmission; ``n2`` the (length-averaged) excited density; ``n_total`` the dopant density;
``beta`` the excited fraction N2 / N_total; a *flux* is photons per m² per s.

Measured quantities (``ln_ratio``, ``n2`` estimated from noisy data) may be of either sign and
are only required to be finite; physical parameters (wavelengths, cross-sections, lengths,
lifetimes, densities) are checked and a ``ValueError`` names the argument that is wrong.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants

H = constants.h  #: Planck constant, J s (CODATA via scipy.constants)
C = constants.c  #: speed of light in vacuum, m/s
K_B = constants.k  #: Boltzmann constant, J/K

#: Above this exponent exp() is close to overflowing float64 (exp(709.8) is the largest).
_EXP_SAFE = 700.0


# --- argument checks ---------------------------------------------------------------------


_SCALARS = (float, int, np.float64)


def _real(value, name: str) -> np.ndarray:
    """``value`` as a float64 array; finite, else ValueError naming ``name``."""
    if type(value) in _SCALARS:  # the common case of one number, without numpy's reductions
        if not math.isfinite(value):
            raise ValueError(f"{name}: must be finite, got {float(value)!r}")
        return np.float64(value)
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: expected a real number or an array of them, got {value!r}") from None
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name}: must be finite, got {_first(arr, ~np.isfinite(arr))}")
    return arr


def _first(arr: np.ndarray, bad: np.ndarray) -> str:
    return repr(float(arr[bad].flat[0])) if arr.ndim else repr(float(arr))


def _positive(value, name: str, what: str = "") -> np.ndarray:
    arr = _real(value, name)
    if arr <= 0 if arr.ndim == 0 else np.any(arr <= 0):
        raise ValueError(f"{name}: must be positive{what}, got {_first(arr, arr <= 0)}")
    return arr


def _nonnegative(value, name: str, what: str = "") -> np.ndarray:
    arr = _real(value, name)
    if arr < 0 if arr.ndim == 0 else np.any(arr < 0):
        raise ValueError(f"{name}: must be zero or positive{what}, got {_first(arr, arr < 0)}")
    return arr


def _cross_sections(sigma_e, sigma_a, e_name="sigma_e", a_name="sigma_a"):
    """Both cross-sections non-negative and not both zero."""
    se = _nonnegative(sigma_e, e_name, " (a cross-section)")
    sa = _nonnegative(sigma_a, a_name, " (a cross-section)")
    total = se + sa
    if np.any(total <= 0):
        raise ValueError(f"{e_name}, {a_name}: {e_name} + {a_name} must be positive, got 0")
    return se, sa, total


def _energy(wavelength, name: str) -> np.ndarray:
    """Photon energy h c / lambda of a checked wavelength (ValueError naming ``name``)."""
    return H * C / _positive(wavelength, name, " (a wavelength in m)")


def _out(x) -> np.float64 | np.ndarray:
    """A 0-d result as numpy.float64, anything else as a float64 array."""
    return np.asarray(x, dtype=np.float64)[()]


# --- photons, saturation, transparency ---------------------------------------------------


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
    return _out(_energy(wavelength, "wavelength"))


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
    i = _nonnegative(intensity, "intensity", " (an intensity)")
    return _out(i / _energy(wavelength, "wavelength"))


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
    _, sa, total = _cross_sections(sigma_e, sigma_a)
    return _out(sa / total)


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
    _, _, total = _cross_sections(sigma_e, sigma_a)
    t = _positive(tau, "tau", " (a lifetime)")
    return _out(_energy(wavelength, "wavelength") / (total * t))


def saturation_fluence(wavelength, sigma_e, sigma_a):
    """Gain saturation fluence ``h nu / (sigma_e + sigma_a)`` in J/m².

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 4.1.
    .. [2] L. M. Frantz and J. S. Nodvik, "Theory of pulse propagation in a laser amplifier",
       J. Appl. Phys. 34, 2346 (1963).
    """
    _, _, total = _cross_sections(sigma_e, sigma_a)
    return _out(_energy(wavelength, "wavelength") / total)


# --- probe ratio <-> inversion <-> gain --------------------------------------------------


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
    r = _real(ln_ratio, "ln_ratio")
    _, _, total = _cross_sections(sigma_e, sigma_a)
    ell = _positive(length, "length")
    return _out(r / (total * ell))


def ln_ratio_from_excited_density(n2, sigma_e, sigma_a, length):
    """The inverse of `excited_density_from_ln_ratio`: ``ln R = (sigma_e + sigma_a) L <N2>``.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    n = _real(n2, "n2")
    _, _, total = _cross_sections(sigma_e, sigma_a)
    ell = _positive(length, "length")
    return _out(n * total * ell)


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
    r = _real(ln_ratio, "ln_ratio")
    sa = _nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    nt = _nonnegative(n_total, "n_total", " (a density)")
    ell = _positive(length, "length")
    return _out(np.exp(r - sa * nt * ell))


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
    n = _real(n2, "n2")
    nt = _nonnegative(n_total, "n_total", " (a density)")
    se = _nonnegative(sigma_e, "sigma_e", " (a cross-section)")
    sa = _nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    return _out(se * n - sa * (nt - n))


def ln_gain_to_db(ln_gain):
    """A power gain given by its natural logarithm, in decibels: ``10 log10(e) ln G``.

    Never forms ``G`` itself, so it holds for gains far beyond the range of a float (an
    optically thick sample's ``exp(-sigma_a N L)`` underflows above ``sigma_a N L ~ 745``).

    References
    ----------
    .. [1] IEC 60027-3, *Letter symbols to be used in electrical technology - Part 3:
       Logarithmic and related quantities, and their units* (decibel, neper).
    """
    return _out(10.0 * math.log10(math.e) * _real(ln_gain, "ln_gain"))


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
    n = _positive(refractive_index, "refractive_index")
    if np.any(n < 1.0):
        raise ValueError(f"refractive_index: must be at least 1, got {float(np.min(n))!r}")
    return _out(((n - 1.0) / (n + 1.0)) ** 2)


def gain_db(linear):
    """A linear power gain in decibels, ``10 log10(G)``.

    References
    ----------
    .. [1] IEC 60027-3, *Letter symbols to be used in electrical technology - Part 3:
       Logarithmic and related quantities, and their units*.
    """
    g = _positive(linear, "linear", " (a linear gain)")
    return _out(10.0 * np.log10(g))


def per_m_to_per_cm(coefficient):
    """A coefficient in m⁻¹ expressed in cm⁻¹ (divide by 100).

    References
    ----------
    .. [1] BIPM, *The International System of Units (SI)*, 9th ed., 2019 (prefix centi).
    """
    return _out(_real(coefficient, "coefficient") / 100.0)


def per_m_to_db_per_cm(coefficient):
    """A gain coefficient in m⁻¹ expressed in dB/cm, ``10 log10(e) g / 100``.

    References
    ----------
    .. [1] IEC 60027-3 (decibel); BIPM SI Brochure, 9th ed., 2019.
    """
    return _out(10.0 * math.log10(math.e) * _real(coefficient, "coefficient") / 100.0)


def unpumped_transmission(sigma_a, n_total, length):
    """Beer-Lambert transmission of the unpumped sample, ``exp(-sigma_a N_total L)``.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.4.
    """
    sa = _nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    nt = _nonnegative(n_total, "n_total", " (a density)")
    ell = _positive(length, "length")
    return _out(np.exp(-sa * nt * ell))


def full_inversion_gain(sigma_e, n_total, length):
    """Single-pass gain with every ion excited, ``exp(sigma_e N_total L)``; the upper bound.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    se = _nonnegative(sigma_e, "sigma_e", " (a cross-section)")
    nt = _nonnegative(n_total, "n_total", " (a density)")
    ell = _positive(length, "length")
    return _out(np.exp(se * nt * ell))


# --- spectroscopy: McCumber, Füchtbauer-Ladenburg ----------------------------------------


def _mccumber_exponent(wavelength, epsilon, temperature):
    e = _positive(epsilon, "epsilon", " (an energy in J)")
    t = _positive(temperature, "temperature", " (in K)")
    return (e - _energy(wavelength, "wavelength")) / (K_B * t)


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
    sa = _nonnegative(sigma_a, "sigma_a", " (a cross-section)")
    x = _mccumber_exponent(wavelength, epsilon, temperature)
    with np.errstate(over="ignore", invalid="ignore"):
        se = np.where(sa > 0, sa * np.exp(x), 0.0)
    return _out(se)


def mccumber_absorption(wavelength, sigma_e, epsilon, temperature):
    """Absorption cross-section from emission, ``sigma_e exp((h nu - epsilon) / kT)``.

    The inverse of `mccumber_emission`; same parameters with ``sigma_e`` given.

    References
    ----------
    .. [1] D. E. McCumber, Phys. Rev. 136, A954 (1964).
    .. [2] S. A. Payne et al., IEEE J. Quantum Electron. 28, 2619 (1992).
    """
    se = _nonnegative(sigma_e, "sigma_e", " (a cross-section)")
    x = _mccumber_exponent(wavelength, epsilon, temperature)
    with np.errstate(over="ignore", invalid="ignore"):
        sa = np.where(se > 0, se * np.exp(-x), 0.0)
    return _out(sa)


def _trapezoid(y: np.ndarray, x: np.ndarray) -> float:
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(x)))


def fuchtbauer_ladenburg(wavelength, intensity, refractive_index, radiative_lifetime, *,
                         branching_ratio=1.0):
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
    lam = _positive(wavelength, "wavelength")
    if lam.ndim != 1 or lam.size < 2:
        raise ValueError(f"wavelength: must be a 1-d array of at least 2 values, got shape {lam.shape}")
    if np.any(np.diff(lam) <= 0):
        raise ValueError("wavelength: must be strictly increasing")
    spec = _nonnegative(intensity, "intensity")
    if spec.shape != lam.shape:
        raise ValueError(f"intensity: shape {spec.shape} does not match wavelength {lam.shape}")
    n = _positive(refractive_index, "refractive_index")
    tau = _positive(radiative_lifetime, "radiative_lifetime", " (a lifetime)")
    beta = _positive(branching_ratio, "branching_ratio")
    if np.any(beta > 1):
        raise ValueError(f"branching_ratio: must be at most 1, got {float(np.max(beta))!r}")
    norm = _trapezoid(lam * spec, lam)
    if not norm > 0:
        raise ValueError("intensity: must not be zero everywhere")
    return _out(beta * lam**5 * spec / (8.0 * math.pi * n**2 * C * tau * norm))


# --- pulses: Frantz-Nodvik ---------------------------------------------------------------


def frantz_nodvik_output(f_in, f_sat, g0):
    """Output fluence of a short pulse through an amplifier (Frantz-Nodvik).

    ``F_out = F_sat ln(1 + G0 (exp(F_in / F_sat) - 1))``, computed without overflow for large
    ``F_in / F_sat`` (there ``F_out -> F_in + F_sat ln G0``) and without loss of precision for
    tiny inputs (there ``F_out -> G0 F_in``).

    Parameters
    ----------
    f_in : float or array_like
        Input fluence in J/m², zero or positive.
    f_sat : float or array_like
        Saturation fluence in J/m², positive.
    g0 : float or array_like
        Small-signal single-pass gain (linear), positive (below 1 for an absorber).

    References
    ----------
    .. [1] L. M. Frantz and J. S. Nodvik, J. Appl. Phys. 34, 2346 (1963).
    .. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 4.1.
    """
    fi = _nonnegative(f_in, "f_in", " (a fluence)")
    fs = _positive(f_sat, "f_sat", " (a fluence)")
    g = _positive(g0, "g0", " (a linear gain)")
    x, fs, g = np.broadcast_arrays(fi / fs, fs, g)
    log_g = np.log(g)
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        direct = np.log1p(g * np.expm1(x))
        # 1 + G0 (e^x - 1) = G0 e^x (1 + (1 - G0) e^(-x) / G0)
        large = x + log_g + np.log1p((1.0 - g) * np.exp(-(x + log_g)))
    small = (x <= _EXP_SAFE) & (x + log_g <= _EXP_SAFE)
    return _out(fs * np.where(small, direct, large))


def frantz_nodvik_small_signal_gain(f_in, f_out, f_sat):
    """Small-signal gain from a pulse's input and output fluences (inverse Frantz-Nodvik).

    ``G0 = (exp(F_out / F_sat) - 1) / (exp(F_in / F_sat) - 1)``, computed without overflow.

    Parameters
    ----------
    f_in, f_out : float or array_like
        Input and output fluence in J/m², positive.
    f_sat : float or array_like
        Saturation fluence in J/m², positive.

    Returns
    -------
    numpy.float64 or numpy.ndarray
        G0 (linear); ``inf`` only if G0 is beyond the float64 range.

    References
    ----------
    .. [1] L. M. Frantz and J. S. Nodvik, J. Appl. Phys. 34, 2346 (1963).
    """
    fi = _positive(f_in, "f_in", " (a fluence)")
    fo = _positive(f_out, "f_out", " (a fluence)")
    fs = _positive(f_sat, "f_sat", " (a fluence)")
    x, y = np.broadcast_arrays(fi / fs, fo / fs)
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        direct = np.expm1(y) / np.expm1(x)
        large = np.exp(y - x) * (np.expm1(-y) / np.expm1(-x))
    small = np.maximum(x, y) <= _EXP_SAFE
    return _out(np.where(small, direct, large))


def frantz_nodvik_correction(g_meas, f_in, f_sat):
    """Small-signal gain of a pulsed probe from its measured energy gain.

    A pulsed probe that is not weak is saturating the gain it measures; its measured energy
    (fluence) gain ``G_meas = F_out / F_in`` is below the small-signal gain ``G0``, which this
    returns via `frantz_nodvik_small_signal_gain`.

    Parameters
    ----------
    g_meas : float or array_like
        Measured energy gain ``F_out / F_in`` (linear), positive.
    f_in : float or array_like
        Input fluence of the pulse in J/m², positive.
    f_sat : float or array_like
        Saturation fluence in J/m², positive.

    References
    ----------
    .. [1] L. M. Frantz and J. S. Nodvik, J. Appl. Phys. 34, 2346 (1963).
    """
    gm = _positive(g_meas, "g_meas", " (a linear gain)")
    fi = _positive(f_in, "f_in", " (a fluence)")
    return frantz_nodvik_small_signal_gain(fi, gm * fi, f_sat)


def probe_weakness(probe_intensity, i_sat):
    """How strongly a CW probe saturates the gain it measures, ``I_probe / I_sat``.

    The small-signal analysis holds while this is well below 1; the threshold is a setting.

    References
    ----------
    .. [1] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 7.5.
    """
    ip = _nonnegative(probe_intensity, "probe_intensity", " (an intensity)")
    isat = _positive(i_sat, "i_sat", " (an intensity)")
    return _out(ip / isat)


# --- rate equations of the pumped manifold -----------------------------------------------


def pump_rate(pump_intensity, pump_wavelength, sigma_a_pump):
    """Absorption rate per ground-state ion, ``sigma_a I / (h nu)``, in s⁻¹.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.3.
    """
    sa = _nonnegative(sigma_a_pump, "sigma_a_pump", " (a cross-section)")
    ip = _nonnegative(pump_intensity, "pump_intensity", " (an intensity)")
    return _out(sa * ip / _energy(pump_wavelength, "pump_wavelength"))


def _rates(pump_flux, sigma_ap, sigma_ep, tau, probe_flux, sigma_as, sigma_es):
    """(up-rate per ground ion A, total relaxation rate k) of dN2/dt = A N_total - k N2."""
    fp = _nonnegative(pump_flux, "pump_flux", " (a photon flux)")
    fs = _nonnegative(probe_flux, "probe_flux", " (a photon flux)")
    sap = _nonnegative(sigma_ap, "sigma_ap", " (a cross-section)")
    sep = _nonnegative(sigma_ep, "sigma_ep", " (a cross-section)")
    sas = _nonnegative(sigma_as, "sigma_as", " (a cross-section)")
    ses = _nonnegative(sigma_es, "sigma_es", " (a cross-section)")
    t = _positive(tau, "tau", " (a lifetime)")
    up = sap * fp + sas * fs
    k = (sap + sep) * fp + (sas + ses) * fs + 1.0 / t
    return up, k


def steady_state_fraction(pump_intensity, pump_wavelength, sigma_a_pump, sigma_e_pump, tau, *,
                          probe_intensity=0.0, probe_wavelength=None, sigma_e_probe=0.0,
                          sigma_a_probe=0.0):
    """Steady-state excited fraction ``beta = N2 / N_total`` under CW pump (and probe).

    From ``dN2/dt = (sigma_ap N1 - sigma_ep N2) Phi_p + (sigma_as N1 - sigma_es N2) Phi_s
    - N2 / tau`` with ``N1 = N_total - N2`` and ``Phi = I / (h nu)``:
    ``beta = (sigma_ap Phi_p + sigma_as Phi_s) / ((sigma_ap + sigma_ep) Phi_p
    + (sigma_as + sigma_es) Phi_s + 1 / tau)``.

    Parameters
    ----------
    pump_intensity : float or array_like
        Pump intensity in W/m².
    pump_wavelength : float or array_like
        Pump wavelength in m.
    sigma_a_pump, sigma_e_pump : float or array_like
        Absorption and emission cross-sections at the pump, m².
    tau : float or array_like
        Upper-state lifetime in s.
    probe_intensity, probe_wavelength, sigma_e_probe, sigma_a_probe : optional
        The probe's intensity (W/m²), wavelength (m; needed when the probe intensity is not
        zero) and cross-sections (m²). The default is a probe too weak to matter.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    .. [2] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 7.3.
    """
    phi_p = (_nonnegative(pump_intensity, "pump_intensity", " (an intensity)")
             / _energy(pump_wavelength, "pump_wavelength"))
    ip = _nonnegative(probe_intensity, "probe_intensity", " (an intensity)")
    if probe_wavelength is None:
        if np.any(ip > 0):
            raise ValueError("probe_wavelength: needed when probe_intensity is not zero")
        phi_s = np.zeros_like(ip)
    else:
        phi_s = ip / _energy(probe_wavelength, "probe_wavelength")
    up, k = _rates(phi_p, sigma_a_pump, sigma_e_pump, tau, phi_s, sigma_a_probe, sigma_e_probe)
    return _out(up / k)


def probe_held_fraction(probe_flux, sigma_e, sigma_a, tau):
    """Excited fraction a CW probe alone keeps up (no pump): the unpumped reference state.

    The two-level steady state under the probe's own stimulated rates (absorption
    ``sigma_a Phi_s`` up, emission ``sigma_e Phi_s`` and decay ``1 / tau`` down):
    ``beta_off = sigma_a Phi_s / ((sigma_a + sigma_e) Phi_s + 1 / tau)``. A baseline taken with
    the pump off already holds this much excitation, so ln R measures the *change* from it.

    Parameters
    ----------
    probe_flux : float or array_like
        Probe photon flux, photons m⁻² s⁻¹ (weighted by the probe's own profile).
    sigma_e, sigma_a : float or array_like
        Cross-sections at the probe, m².
    tau : float or array_like
        Upper-state lifetime, s.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (rate equations
       of a quasi-three-level medium; here with the pump rate zero).
    """
    up, k = _rates(0.0, 0.0, 0.0, tau, probe_flux, sigma_a, sigma_e)
    return _out(up / k)


def pump_saturation_parameters(pump_wavelength, sigma_a_pump, sigma_e_pump, tau):
    """``(beta_max, i_sat_pump)`` of the saturation form `beta_of_pump` (weak probe).

    ``beta_max = sigma_ap / (sigma_ap + sigma_ep)`` (the most a pump at this wavelength can
    excite) and ``i_sat_pump = h nu_p / ((sigma_ap + sigma_ep) tau)`` in W/m², so that
    ``steady_state_fraction(I) == beta_of_pump(I, beta_max, i_sat_pump)``.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    _, sap, total = _cross_sections(sigma_e_pump, sigma_a_pump, "sigma_e_pump", "sigma_a_pump")
    t = _positive(tau, "tau", " (a lifetime)")
    return _out(sap / total), _out(_energy(pump_wavelength, "pump_wavelength") / (total * t))


def beta_of_pump(p, beta_max, p_sat):
    """The saturation form ``beta_max (p / p_sat) / (1 + p / p_sat)`` used to fit pump sweeps.

    ``p`` may be a pump intensity, power or current above threshold, as long as ``p_sat`` is in
    the same unit. A fitter should bound ``p_sat > 0`` and ``0 <= beta_max <= 1``
    (scipy.optimize.curve_fit with ``bounds``), since values outside raise ValueError.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    pp = _nonnegative(p, "p")
    bm = _nonnegative(beta_max, "beta_max")
    if np.any(bm > 1):
        raise ValueError(f"beta_max: must be at most 1, got {float(np.max(bm))!r}")
    ps = _positive(p_sat, "p_sat")
    s = pp / ps
    return _out(bm * s / (1.0 + s))


def transparency_pump_intensity(pump_wavelength, sigma_ap, sigma_ep, tau, beta_target):
    """Pump intensity (W/m²) whose steady state is ``beta = beta_target``; ``inf`` if none.

    Inverts `beta_of_pump`: ``I = i_sat_pump beta_t / (beta_max - beta_t)``. Used with
    ``beta_target = transparency_fraction(...)`` at the probe for the pump needed for
    transparency. A target at or beyond ``beta_max`` of the pump cannot be reached at any
    intensity and gives ``math.inf`` (not an error); ``beta_target = 0`` gives 0.

    Parameters
    ----------
    pump_wavelength : float or array_like
        Pump wavelength in m.
    sigma_ap, sigma_ep : float or array_like
        Absorption and emission cross-sections at the pump, m².
    tau : float or array_like
        Upper-state lifetime in s.
    beta_target : float or array_like
        Excited fraction wanted, in [0, 1].

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    beta_max, i_sat = pump_saturation_parameters(pump_wavelength, sigma_ap, sigma_ep, tau)
    bt = _nonnegative(beta_target, "beta_target", " (an excited fraction)")
    if np.any(bt > 1):
        raise ValueError(f"beta_target: must be at most 1, got {float(np.max(bt))!r}")
    with np.errstate(divide="ignore", invalid="ignore"):
        i = i_sat * bt / (beta_max - bt)
    return _out(np.where(bt == 0, 0.0, np.where(bt >= beta_max, math.inf, i)))


def rate_equation_step(n2, n_total, pump_flux, sigma_ap, sigma_ep, tau, dt, *, probe_flux=0.0,
                       sigma_as=0.0, sigma_es=0.0):
    """Excited density after ``dt`` under constant fluxes: the exact solution of the rate equation.

    ``dN2/dt = A N_total - k N2`` with ``A = sigma_ap Phi_p + sigma_as Phi_s`` and
    ``k = (sigma_ap + sigma_ep) Phi_p + (sigma_as + sigma_es) Phi_s + 1 / tau`` is linear, so
    ``N2(dt) = N2ss + (N2 - N2ss) exp(-k dt)`` with ``N2ss = A N_total / k``. Exact for any
    step length; all arguments broadcast (e.g. one value per slice of the sample).

    Parameters
    ----------
    n2 : float or array_like
        Excited density now, m⁻³, in [0, n_total].
    n_total : float or array_like
        Dopant density, m⁻³.
    pump_flux : float or array_like
        Pump photon flux, photons m⁻² s⁻¹ (see `photon_flux`).
    sigma_ap, sigma_ep : float or array_like
        Cross-sections at the pump, m².
    tau : float or array_like
        Upper-state lifetime, s.
    dt : float or array_like
        Step length, s, zero or positive.
    probe_flux, sigma_as, sigma_es : float or array_like, optional
        Probe photon flux and cross-sections at the probe.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, ch. 6 (rate equations).
    """
    nt = _nonnegative(n_total, "n_total", " (a density)")
    n = _nonnegative(n2, "n2", " (a density)")
    if np.any(n > nt * (1.0 + 1e-9)):
        raise ValueError("n2: must not exceed n_total")
    step = _nonnegative(dt, "dt", " (a time step)")
    up, k = _rates(pump_flux, sigma_ap, sigma_ep, tau, probe_flux, sigma_as, sigma_es)
    n_ss = up * nt / k
    return _out(n + (n_ss - n) * -np.expm1(-k * step))
