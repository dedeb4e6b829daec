"""Pulsed probes: the Frantz-Nodvik relation between input fluence, output fluence and
small-signal gain, and the correction of a measured pulse gain.

Pure functions of numbers, SI units, vectorised over numpy arrays; see `bench.physics` for the
conventions and the words used.
"""

from __future__ import annotations

import numpy as np

from bench.physics.arguments import (
    EXP_SAFE,
    as_result,
    check_nonnegative,
    check_positive,
)


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
    fi = check_nonnegative(f_in, "f_in", " (a fluence)")
    fs = check_positive(f_sat, "f_sat", " (a fluence)")
    g = check_positive(g0, "g0", " (a linear gain)")
    x, fs, g = np.broadcast_arrays(fi / fs, fs, g)
    log_g = np.log(g)
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        direct = np.log1p(g * np.expm1(x))
        # 1 + G0 (e^x - 1) = G0 e^x (1 + (1 - G0) e^(-x) / G0)
        large = x + log_g + np.log1p((1.0 - g) * np.exp(-(x + log_g)))
    small = (x <= EXP_SAFE) & (x + log_g <= EXP_SAFE)
    return as_result(fs * np.where(small, direct, large))


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
    fi = check_positive(f_in, "f_in", " (a fluence)")
    fo = check_positive(f_out, "f_out", " (a fluence)")
    fs = check_positive(f_sat, "f_sat", " (a fluence)")
    x, y = np.broadcast_arrays(fi / fs, fo / fs)
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        direct = np.expm1(y) / np.expm1(x)
        large = np.exp(y - x) * (np.expm1(-y) / np.expm1(-x))
    small = np.maximum(x, y) <= EXP_SAFE
    return as_result(np.where(small, direct, large))


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
    gm = check_positive(g_meas, "g_meas", " (a linear gain)")
    fi = check_positive(f_in, "f_in", " (a fluence)")
    return frantz_nodvik_small_signal_gain(fi, gm * fi, f_sat)
