"""Argument checks shared by the physics modules: a ``ValueError`` names the argument that is
wrong; results come back as ``numpy.float64`` (0-d) or float64 arrays."""

from __future__ import annotations

import math

import numpy as np

from bench.physics.constants import C, H

#: Above this exponent exp() is close to overflowing float64 (exp(709.8) is the largest).
EXP_SAFE = 700.0

_SCALARS = (float, int, np.float64)


def check_real(value, name: str) -> np.ndarray:
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


def check_positive(value, name: str, what: str = "") -> np.ndarray:
    arr = check_real(value, name)
    if arr <= 0 if arr.ndim == 0 else np.any(arr <= 0):
        raise ValueError(f"{name}: must be positive{what}, got {_first(arr, arr <= 0)}")
    return arr


def check_nonnegative(value, name: str, what: str = "") -> np.ndarray:
    arr = check_real(value, name)
    if arr < 0 if arr.ndim == 0 else np.any(arr < 0):
        raise ValueError(f"{name}: must be zero or positive{what}, got {_first(arr, arr < 0)}")
    return arr


def check_cross_sections(sigma_e, sigma_a, e_name="sigma_e", a_name="sigma_a"):
    """Both cross-sections non-negative and not both zero."""
    se = check_nonnegative(sigma_e, e_name, " (a cross-section)")
    sa = check_nonnegative(sigma_a, a_name, " (a cross-section)")
    total = se + sa
    if np.any(total <= 0):
        raise ValueError(f"{e_name}, {a_name}: {e_name} + {a_name} must be positive, got 0")
    return se, sa, total


def checked_photon_energy(wavelength, name: str) -> np.ndarray:
    """Photon energy h c / lambda of a checked wavelength (ValueError naming ``name``)."""
    return H * C / check_positive(wavelength, name, " (a wavelength in m)")


def as_result(x) -> np.float64 | np.ndarray:
    """A 0-d result as numpy.float64, anything else as a float64 array."""
    return np.asarray(x, dtype=np.float64)[()]
