"""Simulated time for the served bench: one clock shared by every instrument.

Simulated seconds = monotonic real seconds since the clock started x ``speed`` (1: real time;
10: ten times faster, so a 5 s fault happens after 0.5 s of real time).
"""

from __future__ import annotations

import math
import time


class SimClock:
    """Monotonic clock running ``speed`` times faster than real time, from 0 at creation."""

    def __init__(self, speed: float = 1.0):
        if (
            isinstance(speed, bool)
            or not isinstance(speed, (int, float))
            or not math.isfinite(speed)
            or speed <= 0
        ):
            raise ValueError(f"speed: expected a positive number (1 = real time), got {speed!r}")
        self.speed = float(speed)
        self._start = time.monotonic()

    def now(self) -> float:
        """Simulated seconds since the clock started."""
        return (time.monotonic() - self._start) * self.speed

    def real_seconds_until(self, t_sim: float) -> float:
        """Real seconds from now until simulated time ``t_sim`` (0 if it has passed)."""
        return max(0.0, (t_sim - self.now()) / self.speed)
