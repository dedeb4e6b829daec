"""Reader pacing: a detector reader waits until a block's worth of data has accumulated (fewer,
larger blocks cost the interpreter less per sample), except after a full fetch."""

from __future__ import annotations

import queue
import threading

import numpy as np
import pytest

from bench.records import Block
from bench.run.readers import DetectorReader, DropCounter, RunClock


class FakeDigitiser:
    rate_hz = 100e3
    channel_names = ("probe", "reference", "pump_monitor")


def reader(min_block: float, speed: float = 1.0, max_sets: int = 65536) -> DetectorReader:
    return DetectorReader(
        FakeDigitiser(),
        queue.Queue(),
        RunClock(speed),
        DropCounter(),
        threading.Event(),
        max_sets=max_sets,
        min_block=min_block,
    )


def block(n: int) -> Block:
    return Block("detector", 0, 0.0, 1e-5, 0, FakeDigitiser.channel_names, np.zeros((n, 3)))


def test_a_short_block_waits_for_the_rest_of_the_minimum():
    # 300 sets at 100 kHz are 3 ms of data: 17 ms more to wait for a 20 ms block
    assert reader(0.02).pause_after(block(300)) == pytest.approx(0.017)
    assert reader(0.02).pause_after(block(5000)) == 0.0  # already longer than the minimum
    assert reader(0.0).pause_after(block(300)) == 0.0


def test_pacing_follows_the_simulation_speed_and_skips_after_a_full_fetch():
    assert reader(0.02, speed=10.0).pause_after(block(300)) == pytest.approx(0.0017)  # run-clock s / speed
    assert reader(0.02, max_sets=300).pause_after(block(300)) == 0.0  # a full fetch: more is waiting


@pytest.mark.parametrize("bad", [-0.01, float("nan"), float("inf")])
def test_minimum_block_must_be_a_time(bad):
    with pytest.raises(ValueError, match="min_block"):
        reader(bad)
