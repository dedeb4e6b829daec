"""Decimated history: the buckets hold the true min/max/mean of the samples (numpy as the
reference implementation), memory is bounded, and block boundaries do not matter."""

from __future__ import annotations

import numpy as np

from bench.records import Estimate, Quantity
from bench.run.history import EstimateHistory, TraceHistory


def _reference(t, v, bucket):
    numbers = np.floor(t / bucket).astype(int)
    out = {}
    for b in np.unique(numbers):
        m = numbers == b
        out[b] = (v[m].min(axis=0), v[m].max(axis=0), v[m].mean(axis=0))
    return out


def test_buckets_match_a_direct_computation_whatever_the_block_split():
    rng = np.random.default_rng(1)
    t = np.arange(10_000) * 1e-4  # 1 s at 10 kHz
    v = rng.normal(size=(t.size, 2))
    ref = _reference(t, v, 0.01)
    for splits in ([t.size], [137, 5000, 9999], list(range(1, t.size, 333))):
        h = TraceHistory(("a", "b"), bucket=0.01, capacity=500)
        for part_t, part_v in zip(np.split(t, splits), np.split(v, splits)):
            h.add(part_t, part_v)
        view = h.view()
        assert view.t.size == 100
        for i, start in enumerate(view.t):
            lo, hi, mean = ref[int(round(start / 0.01))]
            np.testing.assert_allclose(view.lo[i], lo)
            np.testing.assert_allclose(view.hi[i], hi)
            np.testing.assert_allclose(view.mean[i], mean, rtol=1e-9, atol=1e-12)


def test_capacity_bounds_memory_and_keeps_the_newest():
    h = TraceHistory(("a",), bucket=0.01, capacity=50)
    for k in range(100):
        t = k * 0.1 + np.arange(1000) * 1e-4
        h.add(t, np.full((1000, 1), float(k)))
    view = h.view()
    assert view.t.size == 50
    assert np.all(np.diff(view.t) > 0)
    assert view.mean[-1, 0] == 99.0
    assert view.t[-1] >= 9.9


def test_estimate_history_is_a_ring():
    h = EstimateHistory(keys=("beta",), capacity=3)
    for k in range(5):
        h.add(Estimate(t=float(k), mode="watch", scope="cumulative", values={"beta": Quantity(k / 10, 0.01)}))
    v = h.view()
    np.testing.assert_allclose(v.t, [2, 3, 4])
    np.testing.assert_allclose(v.value[:, 0], [0.2, 0.3, 0.4])
