"""Bounded, decimated history of the signals and estimates, for whoever displays a run.

A `TraceHistory` reduces each block to fixed-width time buckets (minimum, maximum and mean of
each channel per bucket) and keeps the latest buckets in a numpy ring buffer, so memory is
fixed however long the run lasts and a plot of a million samples a second costs a few thousand
points. `EstimateHistory` keeps the latest cumulative estimates the same way. Both are written
by the pipeline's consumer thread only; `view()` returns copies that a display may keep.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bench.records import Block, Estimate


@dataclass(frozen=True, eq=False)
class TraceView:
    """Copies of the buffered buckets, oldest first."""

    channels: tuple[str, ...]
    t: np.ndarray  # bucket start times (s, run clock)
    lo: np.ndarray  # shape (n, n_channels)
    hi: np.ndarray
    mean: np.ndarray


class TraceHistory:
    """Min/max/mean per time bucket of each channel, latest ``capacity`` buckets."""

    def __init__(self, channels: tuple[str, ...], bucket: float = 0.01, capacity: int = 3000):
        if bucket <= 0:
            raise ValueError(f"bucket: {bucket} is not positive")
        if capacity < 2:
            raise ValueError(f"capacity: {capacity} is below 2")
        self.channels = tuple(channels)
        self.bucket = float(bucket)
        self.capacity = int(capacity)
        k = len(self.channels)
        self._t = np.full(self.capacity, np.nan)
        self._lo = np.full((self.capacity, k), np.nan)
        self._hi = np.full((self.capacity, k), np.nan)
        self._sum = np.zeros((self.capacity, k))
        self._count = np.zeros(self.capacity, dtype=np.int64)
        self._last_bucket: int | None = None  # absolute bucket number of the newest slot
        self._written = 0

    def _slot(self, bucket_number: int) -> int:
        return bucket_number % self.capacity

    def add(self, t: np.ndarray, values: np.ndarray) -> None:
        """Add samples at times ``t`` (increasing) with ``values`` of shape (n, n_channels)."""
        if t.size == 0:
            return
        numbers = np.floor(t / self.bucket).astype(np.int64)
        if self._last_bucket is not None:
            numbers = np.maximum(numbers, self._last_bucket)  # late samples join the newest bucket
        starts = np.flatnonzero(np.r_[True, numbers[1:] != numbers[:-1]])
        lo = np.minimum.reduceat(values, starts, axis=0)
        hi = np.maximum.reduceat(values, starts, axis=0)
        sm = np.add.reduceat(values, starts, axis=0)
        cnt = np.diff(np.r_[starts, numbers.size])
        bucket_numbers = numbers[starts]
        if bucket_numbers.size > self.capacity:  # only the newest fit
            keep = slice(bucket_numbers.size - self.capacity, None)
            bucket_numbers, lo, hi, sm, cnt = bucket_numbers[keep], lo[keep], hi[keep], sm[keep], cnt[keep]
        for i, b in enumerate(bucket_numbers):  # loop over buckets (a few per block), not samples
            s = self._slot(int(b))
            if self._last_bucket is not None and b == self._last_bucket:
                self._lo[s] = np.fmin(self._lo[s], lo[i])
                self._hi[s] = np.fmax(self._hi[s], hi[i])
                self._sum[s] += sm[i]
                self._count[s] += cnt[i]
            else:
                self._t[s] = b * self.bucket
                self._lo[s], self._hi[s], self._sum[s], self._count[s] = lo[i], hi[i], sm[i], cnt[i]
                self._written += 1
            self._last_bucket = int(b)

    def add_block(self, block: Block) -> None:
        cols = [block.channels.index(c) for c in self.channels if c in block.channels]
        if len(cols) != len(self.channels):
            return
        self.add(block.times(), block.data[:, cols])

    def view(self) -> TraceView:
        n = min(self._written, self.capacity)
        if n == 0 or self._last_bucket is None:
            empty = np.empty((0, len(self.channels)))
            return TraceView(self.channels, np.empty(0), empty, empty, empty)
        newest = self._slot(self._last_bucket)
        order = (np.arange(newest - n + 1, newest + 1)) % self.capacity
        cnt = np.maximum(self._count[order], 1)[:, None]
        valid = np.isfinite(self._t[order])
        order = order[valid]
        cnt = cnt[valid]
        return TraceView(
            self.channels,
            self._t[order].copy(),
            self._lo[order].copy(),
            self._hi[order].copy(),
            self._sum[order] / cnt,
        )


@dataclass(frozen=True, eq=False)
class EstimateView:
    t: np.ndarray
    keys: tuple[str, ...]
    value: np.ndarray  # shape (n, n_keys)
    sigma: np.ndarray


class EstimateHistory:
    """The latest ``capacity`` estimates of a few keys (value and sigma), oldest first."""

    def __init__(
        self, keys: tuple[str, ...] = ("beta", "gain_db", "ln_ratio", "tau_s"), capacity: int = 2000
    ):
        self.keys = tuple(keys)
        self.capacity = int(capacity)
        self._t = np.full(self.capacity, np.nan)
        self._v = np.full((self.capacity, len(self.keys)), np.nan)
        self._s = np.full((self.capacity, len(self.keys)), np.nan)
        self._n = 0

    def add(self, estimate: Estimate) -> None:
        i = self._n % self.capacity
        self._t[i] = estimate.t
        for j, k in enumerate(self.keys):
            q = estimate.values.get(k)
            self._v[i, j] = np.nan if q is None else q.value
            self._s[i, j] = np.nan if q is None else q.sigma
        self._n += 1

    def view(self) -> EstimateView:
        n = min(self._n, self.capacity)
        order = np.arange(self._n - n, self._n) % self.capacity
        return EstimateView(self._t[order].copy(), self.keys, self._v[order].copy(), self._s[order].copy())
