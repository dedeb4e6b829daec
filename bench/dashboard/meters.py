"""Small meters for the dashboard's own health: repaint rate, reading-to-screen latency, read rates.

`ScreenLatency` collects, for each repaint that shows new readings, how long the oldest of
them took to reach the screen (from the sample's time: acquisition, queue, consumer, the wait
for the timer, and render), and how old the newest one was. `RateMeter` turns a growing counter into a rate. Both are plain objects fed by the
app's timer on the event loop; nothing here touches a widget or a thread.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class LatencyFigures:
    """Reading-to-screen latencies (s) over recent repaints, and the repaint rate (Hz).

    ``mean``, ``median``, ``p95``, ``worst``: for each repaint that showed new readings, the
    time from the oldest of them (the first sample after those of the repaint before) to the
    screen: the latency of every reading is at most that of its repaint. ``fresh_median``,
    ``fresh_p95``: the age of the newest reading at each repaint.
    """

    n: int
    mean: float
    median: float
    p95: float
    worst: float
    repaint_hz: float
    fresh_median: float
    fresh_p95: float


class ScreenLatency:
    """Recent repaints (time, reading-to-screen latency, age of the newest reading); ``keep``."""

    def __init__(self, keep: int = 600) -> None:
        if keep < 2:
            raise ValueError(f"keep: {keep} is below 2")
        self._latency: deque[float] = deque(maxlen=keep)
        self._fresh: deque[float] = deque(maxlen=keep)
        self._painted: deque[float] = deque(maxlen=keep)
        self._shown_until: float | None = None

    def add(self, painted_at: float, newest_sample_t: float) -> None:
        """A repaint at run-clock ``painted_at`` showed data up to ``newest_sample_t``."""
        if not (math.isfinite(painted_at) and math.isfinite(newest_sample_t)):
            return
        self._painted.append(painted_at)
        before = self._shown_until
        if before is not None and newest_sample_t <= before:
            return  # nothing new on this repaint
        oldest_new = newest_sample_t if before is None else before
        self._latency.append(max(0.0, painted_at - oldest_new))
        self._fresh.append(max(0.0, painted_at - newest_sample_t))
        self._shown_until = newest_sample_t

    def figures(self, speed: float = 1.0) -> LatencyFigures | None:
        """Latencies in run-clock s (divide by ``speed`` for real s) and repaints per real s."""
        if len(self._latency) < 2:
            return None
        lat = np.asarray(self._latency)
        fresh = np.asarray(self._fresh)
        span = (self._painted[-1] - self._painted[0]) / speed
        hz = (len(self._painted) - 1) / span if span > 0 else math.nan
        return LatencyFigures(
            len(lat),
            float(lat.mean()),
            float(np.median(lat)),
            float(np.percentile(lat, 95)),
            float(lat.max()),
            hz,
            float(np.median(fresh)),
            float(np.percentile(fresh, 95)),
        )


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
