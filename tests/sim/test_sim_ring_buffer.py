"""The simulated digitiser's memory: ring buffer, overflow counting, lazy generation.

Behaviour is the simulator's contract (simulated_instruments/COMMANDS.md: absolute indices
since INIT, oldest unread first, overflow counted in FETC:LOST?); the ring-buffer arithmetic
itself is common practice, no source.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.config import load_bench
from simulated_instruments.optical_setup import BenchModel
from simulated_instruments.ring_buffer import SampleRing
from simulated_instruments.shared_state import BenchCore


class ManualClock:
    def __init__(self):
        self.t = 0.0
        self.speed = 1.0

    def now(self):
        return self.t


def block(first: int, n: int) -> np.ndarray:
    return np.repeat(np.arange(first, first + n, dtype=np.float32)[:, None], 3, axis=1)


def test_fifo_with_wrap_around():
    ring = SampleRing(8)
    ring.write(block(0, 5))
    data, first = ring.read(3)
    assert first == 0 and data[:, 0].tolist() == [0, 1, 2]
    ring.write(block(5, 6))  # wraps
    data, first = ring.read(100)
    assert first == 3 and data[:, 0].tolist() == list(range(3, 11))
    assert ring.lost == 0 and ring.waiting == 0
    data, first = ring.read(5)
    assert data.shape == (0, 3) and first == 11


def test_overflow_drops_the_oldest_and_counts_them():
    ring = SampleRing(8)
    ring.write(block(0, 6))
    ring.write(block(6, 6))
    assert ring.lost == 4 and ring.read_index == 4
    data, first = ring.read(100)
    assert first == 4 and data[:, 0].tolist() == list(range(4, 12))
    ring.write(block(12, 20))  # one write larger than the buffer
    data, first = ring.read(100)
    assert first == 24 and data[:, 0].tolist() == list(range(24, 32)) and ring.lost == 16


def test_skip_counts_unread_and_skipped_as_lost():
    ring = SampleRing(8)
    ring.write(block(0, 3))
    ring.skip_to(20)
    assert ring.lost == 20 and ring.read_index == 20 and ring.waiting == 0
    with pytest.raises(ValueError, match="capacity"):
        SampleRing(0)


def test_core_generates_lazily_and_loses_what_overflows():
    cfg = load_bench()
    clock = ManualClock()
    core = BenchCore(BenchModel(cfg, seed=7), clock, capacity=1000)
    with core.lock:
        core.sync()
        core.model.start_acquisition(100e3)
        core.ring.clear(0)
    clock.t = 0.005  # 500 sets due
    with core.lock:
        core.sync()
    assert core.ring.waiting == 500 and core.ring.lost == 0
    clock.t = 0.1  # 10000 sets since INIT: only the last 1000 can be kept
    with core.lock:
        core.sync()
    assert core.ring.lost == 9000 and core.ring.read_index == 9000
    data, first = core.ring.read(1000)
    assert first == 9000
    # the same as a model that let the first sets go by
    ref = BenchModel(cfg, seed=7)
    ref.start_acquisition(100e3)
    ref.generate(500)
    ref.skip(8500)
    want, _ = ref.generate(1000)
    np.testing.assert_array_equal(data, want.astype(np.float32))
