"""Small meters for the dashboard's own health: repaint rate, reading-to-screen latency, read rates.

`ScreenLatency` collects, for each repaint, the run-clock age of the newest sample it showed
(the time from the reading to the screen: acquisition, queue, consumer, timer wait and
render). `RateMeter` turns a growing counter into a rate. Both are plain objects fed by the
app's timer on the event loop; nothing here touches a widget or a thread.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class LatencyFigures:
    """Statistics of recent reading-to-screen latencies (s) and of the repaint rate (Hz)."""

    n: int
    mean: float
    median: float
    p95: float
    worst: float
    repaint_hz: float


class ScreenLatency:
    """Recent (repaint time, latency) pairs; ``keep`` of them."""

    def __init__(self, keep: int = 600) -> None:
        if keep < 2:
            raise ValueError(f"keep: {keep} is below 2")
        self._latency: deque[float] = deque(maxlen=keep)
        self._painted: deque[float] = deque(maxlen=keep)

    def add(self, painted_at: float, newest_sample_t: float) -> None:
        """A repaint at run-clock ``painted_at`` showed data up to ``newest_sample_t``."""
        if not (math.isfinite(painted_at) and math.isfinite(newest_sample_t)):
            return
        self._painted.append(painted_at)
        self._latency.append(max(0.0, painted_at - newest_sample_t))

    def figures(self, speed: float = 1.0) -> LatencyFigures | None:
        """Latencies in run-clock s (divide by ``speed`` for real s) and repaints per real s."""
        if len(self._latency) < 2:
            return None
        lat = np.asarray(self._latency)
        span = (self._painted[-1] - self._painted[0]) / speed
        hz = (len(self._painted) - 1) / span if span > 0 else math.nan
        return LatencyFigures(len(lat), float(lat.mean()), float(np.median(lat)),
                              float(np.percentile(lat, 95)), float(lat.max()), hz)


class RateMeter:
    """Rate of a growing counter, over the last ``window`` seconds of the caller's clock."""

    def __init__(self, window: float = 2.0) -> None:
        if not window > 0:
            raise ValueError(f"window: {window} is not positive")
        self.window = float(window)
        self._points: deque[tuple[float, float]] = deque()

    def add(self, t: float, count: float) -> float | None:
        """Record ``count`` at time ``t``; returns the rate (per s), or None until two points."""
        self._points.append((t, count))
        while len(self._points) > 2 and t - self._points[1][0] >= self.window:
            self._points.popleft()
        (t0, c0), (t1, c1) = self._points[0], self._points[-1]
        if t1 <= t0:
            return None
        return (c1 - c0) / (t1 - t0)
