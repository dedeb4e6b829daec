"""A deadline on the monotonic clock, shared by every read of one exchange with an instrument."""

from __future__ import annotations

import math
import time


class Deadline:
    """A point in time ``timeout_s`` seconds from now, on `time.monotonic`.

    Read loops ask `time_left` before each wait, so the wait shrinks as the deadline nears and
    the whole exchange never takes longer than the timeout, however the bytes trickle in.

    Parameters
    ----------
    timeout_s : float
        Seconds from now; must be finite and >= 0.
    """

    __slots__ = ("_end", "timeout_s")

    def __init__(self, timeout_s: float) -> None:
        if not isinstance(timeout_s, (int, float)) or isinstance(timeout_s, bool):
            raise ValueError(f"timeout_s: expected a number of seconds, got {timeout_s!r}")
        if not math.isfinite(timeout_s) or timeout_s < 0:
            raise ValueError(f"timeout_s: expected a finite number >= 0, got {timeout_s!r}")
        self.timeout_s = float(timeout_s)
        self._end = time.monotonic() + self.timeout_s

    def time_left(self) -> float:
        """Seconds until the deadline, never below 0."""
        return max(0.0, self._end - time.monotonic())

    def expired(self) -> bool:
        """True once the deadline has passed."""
        return time.monotonic() >= self._end

    def __repr__(self) -> str:
        return f"Deadline({self.timeout_s!r} s, {self.time_left():.3f} s left)"
