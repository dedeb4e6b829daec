"""The polled meter's reader: one-sample blocks at the readings' own times, gaps for lost
replies, and the consumer's gap event. The meter here is a stand-in written in the test,
whose clock stamps are known, so the expected times are the midpoints worked out by hand."""

from __future__ import annotations

import queue
import threading
import time

import numpy as np

from bench.config import load_bench
from bench.estimator import EstimatorParams
from bench.run.consumer import Consumer
from bench.run.readers import READ_SPREAD, CommStatus, DropCounter, MeterReader, RunClock
from drivers.errors import InstrumentTimeout
from drivers.instruments.meter import MeterReading


class StandInMeter:
    """Answers readings 0, 1, 2, ... with values 10 k + channel; request ``lost`` times out."""

    channel_names = ("probe", "reference", "pump_monitor")
    period_s = 0.001

    def __init__(self, lost: set[int]):
        self.lost = lost
        self.calls = 0
        self.stamps: list[tuple[float, float]] = []

    def read(self, clock) -> MeterReading:
        k = self.calls
        self.calls += 1
        t1 = clock()
        if k in self.lost:
            raise InstrumentTimeout("no reply", role="detector", resource="stand-in")
        t2 = clock()
        self.stamps.append((t1, t2))
        return MeterReading(t1, t2, np.array([10.0 * k + 1, 10.0 * k + 2, 10.0 * k + 3]))

    def clock(self) -> float:
        return 0.0


def collect(lost: set[int], count: int):
    q: queue.Queue = queue.Queue()
    stop = threading.Event()
    meter = StandInMeter(lost)
    reader = MeterReader(meter, q, RunClock(), DropCounter(), stop)
    reader.start_acquisition()
    reader.start()
    items = []
    deadline = time.monotonic() + 10
    while sum(1 for i in items if not isinstance(i, CommStatus)) < count:
        assert time.monotonic() < deadline, "the reader gave too few blocks"
        try:
            items.append(q.get(timeout=0.1))
        except queue.Empty:
            pass
    stop.set()
    reader.join(2)
    return meter, items


def test_each_reading_is_one_block_at_the_midpoint_of_its_exchange():
    meter, items = collect(set(), 5)
    blocks = [i for i in items if not isinstance(i, CommStatus)]
    for k, b in enumerate(blocks):
        t1, t2 = meter.stamps[k]
        assert (b.n, b.dt, b.seq, b.first_index) == (1, 0.0, k, k)
        assert b.t0 == 0.5 * (t1 + t2)
        assert b.channels == ("probe", "reference", "pump_monitor", READ_SPREAD)
        assert list(b.data[0]) == [10.0 * k + 1, 10.0 * k + 2, 10.0 * k + 3, t2 - t1]
    assert all(b.t0 > a.t0 for a, b in zip(blocks, blocks[1:]))


def test_a_lost_reply_leaves_a_gap_never_a_repeated_value():
    _, items = collect({2}, 4)
    failures = [i for i in items if isinstance(i, CommStatus) and not i.ok]
    blocks = [i for i in items if not isinstance(i, CommStatus)]
    assert len(failures) == 1 and "no reply" in failures[0].detail
    assert [b.first_index for b in blocks] == [0, 1, 3, 4]
    probes = [float(b.data[0, 0]) for b in blocks]
    assert probes == [1.0, 11.0, 31.0, 41.0]  # reading 2's value is nowhere
    # the consumer logs the lost request as a gap event
    consumer = Consumer(EstimatorParams.from_config(load_bench()), "watch", traces=False)
    for b in blocks:
        consumer.process(b)
    gaps = [e for e in consumer.snapshot(with_history=False).events if e.kind == "gap"]
    assert len(gaps) == 1
    assert gaps[0].data["missing"] == 1 and gaps[0].data["first_index"] == 3
