"""Gaussian beams: the peak intensity (or fluence) of a beam of given power (or energy).

Pure functions of numbers, SI units; see `bench.physics` for the conventions.
"""

from __future__ import annotations

import math


def gaussian_peak(total: float, beam_diameter: float) -> float:
    """Peak (on-axis) intensity or fluence of a Gaussian beam, ``2 P / (pi w^2)``, ``w = D/2``.

    ``total`` is the power (W) or pulse energy (J); ``beam_diameter`` the 1/e^2 diameter (m).

    References
    ----------
    .. [1] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 17.1 (Gaussian beams).
    """
    if not (math.isfinite(total) and total >= 0):
        raise ValueError(f"total: must be zero or positive, got {total!r}")
    if not (math.isfinite(beam_diameter) and beam_diameter > 0):
        raise ValueError(f"beam_diameter: must be a positive length in m, got {beam_diameter!r}")
    w = 0.5 * beam_diameter
    return 2.0 * total / (math.pi * w * w)
