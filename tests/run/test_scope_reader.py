"""The scope's reader with a stand-in scope written here: one block per shot with its trigger
times, blocks that never overlap on the run clock, and a missed shot left as a gap of one
record in the sample index (the consumer's ``gap`` event), reported as it happens."""

from __future__ import annotations

import queue
import threading

import numpy as np

from bench.records import TRIGGER_TIME
from bench.run.consumer import Consumer
from bench.run.readers import CommStatus, DropCounter, RunClock
from bench.run.scope_reader import ScopeReader
from drivers.errors import InstrumentTimeout
from drivers.instruments.scope import Waveform

N, DX, X0 = 100, 1e-5, -2e-4


class StandInScope:
    channel_names = ("probe", "reference", "pump_monitor")

    def __init__(self, miss: set[int]):
        self.miss = miss
        self.armed = 0
        self.now = 0.0

    def arm(self):
        self.armed += 1

    def wait_complete(self, clock=None):
        if self.armed - 1 in self.miss:
            raise InstrumentTimeout("no trigger", role="detector")
        return clock()

    def fetch(self):
        k = self.armed
        return tuple(
            Waveform(c, name, X0, DX, np.full(N, 0.1 * c + k)) for c, name in enumerate(self.channel_names, 1)
        )

    def clock(self):
        raise InstrumentTimeout("no clock", role="detector")


def test_one_block_per_shot_and_a_missed_shot_is_a_gap():
    out: queue.Queue = queue.Queue()
    scope = StandInScope(miss={2})
    reader = ScopeReader(scope, out, RunClock(), DropCounter(), threading.Event())
    reader.start_acquisition()
    blocks = [reader.read_once() for _ in range(5)]
    assert blocks[2] is None and reader.missed == 1
    status = out.get_nowait()
    assert isinstance(status, CommStatus) and "shot 2 missed" in status.detail
    got = [b for b in blocks if b is not None]
    assert [b.first_index for b in got] == [0, N, 3 * N, 4 * N]  # shot number x record length
    for b in got:
        assert b.channels[-1] == TRIGGER_TIME and b.dt == DX
        assert b.column(TRIGGER_TIME)[0] == X0 and b.column(TRIGGER_TIME)[-1] == X0 + (N - 1) * DX
    assert all(b.t0 > a.t_end for a, b in zip(got, got[1:]))  # never overlapping
    # the consumer logs the missed shot's record as a gap in the sample index
    consumer = Consumer(_params(), "pulsed", {"pulse_width": 5e-5, "pulse_period": 1e-2})
    for b in got:
        consumer.process(b)
    gaps = [e for e in consumer.snapshot(with_history=False).events if e.kind == "gap"]
    assert len(gaps) == 1 and gaps[0].data["missing"] == N, gaps


def _params():
    from pathlib import Path

    from bench.config import load_bench
    from bench.estimator.params import EstimatorParams

    return EstimatorParams.from_config(
        load_bench(Path(__file__).resolve().parents[2] / "bench" / "data" / "demo_pulsed_bench.toml")
    )
