"""Frozen accumulators the modes share (`add` returns a new one), and two helpers on pump levels."""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["BatchStats", "ScalarStats", "PUMP_LEVEL_TOLERANCE", "level", "pump_level_steady", "residual_mean"]


@dataclass(frozen=True)
class BatchStats:
    """Weighted batch means: mean of the samples and its error from the batch scatter.

    Values are kept relative to ``shift`` (the first batch mean) so that the sums of squares
    do not lose precision.
    """

    k: int = 0
    n: float = 0.0
    shift: float = 0.0
    s1: float = 0.0  # sum n_b d_b
    s2: float = 0.0  # sum n_b^2 d_b^2
    s3: float = 0.0  # sum n_b^2 d_b
    s4: float = 0.0  # sum n_b^2

    def add(self, n_b: float, mean_b: float) -> BatchStats:
        shift = mean_b if self.k == 0 else self.shift
        d = mean_b - shift
        return BatchStats(
            self.k + 1,
            self.n + n_b,
            shift,
            self.s1 + n_b * d,
            self.s2 + n_b * n_b * d * d,
            self.s3 + n_b * n_b * d,
            self.s4 + n_b * n_b,
        )

    def mean_error(self) -> tuple[float, float]:
        if self.k == 0:
            return math.nan, math.nan
        dm = self.s1 / self.n
        if self.k < 2:
            return self.shift + dm, math.nan
        ss = max(self.s2 - 2.0 * dm * self.s3 + dm * dm * self.s4, 0.0)
        return self.shift + dm, math.sqrt(ss / self.n**2 * self.k / (self.k - 1))


@dataclass(frozen=True)
class ScalarStats:
    """Mean and standard error of a list of values (cycles, segment levels)."""

    k: int = 0
    shift: float = 0.0
    s1: float = 0.0
    s2: float = 0.0
    n_samples: float = 0.0

    def add(self, x: float, n_samples: float = 0.0) -> ScalarStats:
        shift = x if self.k == 0 else self.shift
        d = x - shift
        return ScalarStats(self.k + 1, shift, self.s1 + d, self.s2 + d * d, self.n_samples + n_samples)

    def mean(self) -> float:
        return self.shift + self.s1 / self.k if self.k else math.nan

    def std(self) -> float:
        if self.k < 2:
            return math.nan
        dm = self.s1 / self.k
        return math.sqrt(max(self.s2 - self.k * dm * dm, 0.0) / (self.k - 1))

    def error(self) -> float:
        return self.std() / math.sqrt(self.k) if self.k >= 2 else math.nan


def residual_mean(r0: int, n: float, dt: float, tau: float) -> float:
    """Mean of exp(-t / tau) over t = (r + 1/2) dt, r = r0 ... r0 + n - 1 (closed form)."""
    if n <= 0:
        return 0.0
    q = math.exp(-dt / tau)
    nn = int(round(n))
    return q ** (r0 + 0.5) * (-math.expm1(-nn * dt / tau)) / (-math.expm1(-dt / tau)) / nn


#: Two successive pump-on parts have the same pump level when their mean pump-monitor readings
#: agree to this fraction, or to 5 standard errors of their difference if that is more
#: (common practice, no source: a soft-start ramp differs by tens of %).
PUMP_LEVEL_TOLERANCE = 2e-3


def level(n: float, s1: float, s2: float) -> tuple[float, float]:
    """(mean, variance of the mean) of ``n`` readings from their sum and sum of squares."""
    if not n > 0:
        return math.nan, 0.0
    m = s1 / n
    return m, (max(s2 - s1 * m, 0.0) / (n - 1) / n if n > 1 else 0.0)


def pump_level_steady(monitor: tuple[float, float], previous: tuple[float, float], after_edge: bool) -> bool:
    """Whether a pump-on part ran at a steady pump level: its mean monitor reading (mean,
    variance) matches the previous on part's. The first on part after a rising edge with no
    earlier on part to compare with (the output just switched on, perhaps with a soft-start
    ramp) is not trusted; one that starts with the stream (after the step settle time) is."""
    (m, v), (mp, vp) = monitor, previous
    if not math.isfinite(mp):
        return not after_edge
    allowed = max(PUMP_LEVEL_TOLERANCE * max(abs(m), abs(mp)), 5.0 * math.sqrt(v + vp))
    return abs(m - mp) <= allowed
