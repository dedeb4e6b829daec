"""The table of trip conditions is the only place to touch to add one.

A new condition, "probe signal below a floor" (a blocked probe beam or a failed probe laser
leaves the transmission meaningless while the pump goes on heating the sample), is defined here
alone, added to `bench.safety.conditions.CONDITIONS` by a fixture that removes it afterwards, and
shown to trip the guard through the real feed (`TripMonitor.feed_detector` and
`GuardedPump.trip_on`, with a pump driver in memory) and to clear by its own rule. That a guard
stops the pump on a condition and refuses the reset until the condition has cleared is the
manual-reset rule of IEC 60204-1 9.2.3.4 (from memory); the floor is a choice of this test.
"""

from __future__ import annotations

import dataclasses
import uuid

import numpy as np
import pytest

from bench.config import load_bench
from bench.records import PROBE, PUMP_MONITOR, PUMP_ON, REFERENCE, Block
from bench.safety import conditions
from bench.safety.checklist import ChecklistResult
from bench.safety.condition_record import DETECTOR, DETECTOR_FEED, UNJUDGED, Condition, TripCondition
from bench.safety.guard import EMITTING, SAFE, TRIPPED, GuardRefused
from bench.safety.guarded_pump import GuardedPump
from bench.safety.trip_monitor import TripMonitor

BENCH = load_bench()
CFG = BENCH.guard
RATE = 100e3  # Hz
RANGE = 2.0  # V

PROBE_LOW = "probe_below_floor"
PROBE_FLOOR = 0.05  # V, a choice of this test


def check_probe_floor(r):
    if not r.has(PROBE):
        return UNJUDGED
    probe = r.column(PROBE)
    low = probe < PROBE_FLOOR
    if not low.any():
        return None
    i = int(np.argmax(low))
    return TripCondition(
        PROBE_LOW,
        f"probe signal {probe[i]:.3g} V is below its floor {PROBE_FLOOR:g} V at t={r.t[i]:.3f} s",
        float(r.t[i]),
        DETECTOR,
    )


def probe_floor_holds(e):
    # while it holds it is active (its reason answers); once a block showed the probe above the
    # floor, a fresh detector reading after the trip is all that is asked
    return e.fresh(e.latest.reading_times.get(DETECTOR), DETECTOR)


PROBE_FLOOR_RECORD = Condition(
    PROBE_LOW,
    DETECTOR_FEED,
    (PROBE,),
    check=check_probe_floor,
    still_holds=probe_floor_holds,
    summary="trips when the probe signal falls below its floor; clears on a fresh block above it",
)


@pytest.fixture
def probe_floor():
    conditions.CONDITIONS.append(PROBE_FLOOR_RECORD)
    try:
        yield PROBE_FLOOR_RECORD
    finally:
        conditions.CONDITIONS.remove(PROBE_FLOOR_RECORD)


class Clock:
    def __init__(self, t: float = 0.0) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t


class MemoryPump:
    """A pump driver in memory: its output follows the commands."""

    def __init__(self) -> None:
        self.on = True  # left on: start() must switch it off
        self.calls: list[tuple[str, object]] = []
        self.stuck_on = False

    def output(self, on: bool) -> None:
        self.calls.append(("output", on))
        if on or not self.stuck_on:
            self.on = on

    def output_is_on(self) -> bool:
        return self.on

    def interlock_closed(self) -> bool:
        return True

    def mount_temperature(self) -> float:
        return 298.15

    def measured_current(self) -> float:
        return 0.0

    def current_setpoint(self) -> float:
        return 0.0

    def set_current(self, current: float) -> None:
        self.calls.append(("set_current", current))


def detector_block(t0: float, probe: np.ndarray, seq: int = 0) -> Block:
    n = probe.shape[0]
    data = np.column_stack([probe, np.full(n, 0.6), np.full(n, 0.5)])
    return Block(
        "detector", seq, t0, 1.0 / RATE, int(round(t0 * RATE)), (PROBE, REFERENCE, PUMP_MONITOR), data
    )


def emitting_guard(clock: Clock, events: list) -> tuple[GuardedPump, TripMonitor, MemoryPump]:
    monitor = TripMonitor(CFG, started_at=0.0)
    pump = MemoryPump()
    gp = GuardedPump(
        pump, clock=clock, monitor=monitor, max_current=CFG.max_current, event_sink=events.append
    )
    gp.start()
    clock.t = 0.05
    gp.arm(ChecklistResult(True, [], [], "ana", clock.t, uuid.uuid4().hex), who="ana")
    gp.emit("ana")
    assert gp.state == EMITTING and pump.on
    return gp, monitor, pump


def test_a_condition_defined_in_a_test_trips_the_guard_and_clears_by_its_own_rule(probe_floor):
    clock, events = Clock(), []
    gp, monitor, pump = emitting_guard(clock, events)
    clock.t = 0.1
    steady = np.full(1000, 0.8)
    assert monitor.feed_detector(detector_block(0.09, steady), RANGE) == []
    # the probe drops to 10 mV at sample 400 of the next 10 ms block
    dropped = steady.copy()
    dropped[400:] = 0.01
    clock.t = 0.2
    found = monitor.feed_detector(detector_block(0.19, dropped, seq=1), RANGE)
    assert [c.condition for c in found] == [PROBE_LOW]
    assert found[0].seen_at == pytest.approx(0.19 + 400 / RATE)
    gp.trip_on(found)
    assert gp.state == TRIPPED and not pump.on and PROBE_LOW in gp.held
    trip = [e for e in events if e.kind == "trip"][-1]
    assert trip.data["condition"] == PROBE_LOW and "below its floor" in trip.text
    assert trip.data["latency_s"] == pytest.approx(0.2 - found[0].seen_at)
    # still low: reported once only, and the acknowledgement is refused with its reason
    clock.t = 0.3
    assert monitor.feed_detector(detector_block(0.29, np.full(1000, 0.01), seq=2), RANGE) == []
    with pytest.raises(GuardRefused, match="below its floor"):
        gp.acknowledge("ana")
    assert gp.state == TRIPPED
    # the probe is back: the monitor forgets the condition, and its own rule lets the reset through
    clock.t = 0.4
    assert monitor.feed_detector(detector_block(0.39, steady, seq=3), RANGE) == []
    assert PROBE_LOW not in monitor.active_conditions()
    gp.acknowledge("ana")
    assert gp.state == SAFE and not pump.on  # a reset never restarts emission


def test_its_clear_rule_asks_for_a_fresh_reading_after_the_trip(probe_floor):
    monitor = TripMonitor(CFG, started_at=0.0)
    (c,) = monitor.feed_detector(detector_block(1.0, np.full(100, 0.01)), RANGE)
    monitor.feed_detector(detector_block(1.001, np.full(100, 0.8), seq=1), RANGE)
    assert monitor.why_still_holds(PROBE_LOW, now=1.1, since=c.seen_at) is None
    assert "since the trip" in monitor.why_still_holds(PROBE_LOW, now=1.1, since=1.05)
    assert "old" in monitor.why_still_holds(PROBE_LOW, now=1.0 + CFG.stale_after + 0.1, since=c.seen_at)


def test_without_its_record_the_same_readings_trip_nothing():
    assert PROBE_LOW not in [c.name for c in conditions.CONDITIONS]
    monitor = TripMonitor(CFG, started_at=0.0)
    assert monitor.feed_detector(detector_block(1.0, np.full(1000, 0.01)), RANGE) == []
    assert "cannot tell" in monitor.why_still_holds(PROBE_LOW, now=1.1)


def test_a_check_reading_a_channel_its_record_does_not_list_raises():
    record = dataclasses.replace(PROBE_FLOOR_RECORD, name="probe_floor_misdeclared", watches=(REFERENCE,))
    conditions.CONDITIONS.append(record)
    try:
        with pytest.raises(ValueError, match="probe_floor_misdeclared.*'probe'"):
            TripMonitor(CFG).feed_detector(detector_block(1.0, np.full(10, 0.8)), RANGE)
    finally:
        conditions.CONDITIONS.remove(record)


def test_every_record_names_bench_file_keys_that_exist_and_a_unique_name():
    # the bench file's tables as loaded (bench.config), not the table itself, say what exists
    names = [c.name for c in conditions.CONDITIONS]
    assert len(names) == len(set(names))
    for record in conditions.CONDITIONS:
        assert record.summary, record.name
        for key in record.keys:
            table, field = key.split(".")
            assert hasattr(getattr(BENCH, table), field), (record.name, key)


def test_a_record_with_a_wrong_shape_is_refused_naming_it():
    with pytest.raises(ValueError, match="condition 'x': feed 'nowhere'"):
        Condition("x", "nowhere", (), check=check_probe_floor, still_holds=probe_floor_holds)
    with pytest.raises(ValueError, match="condition 'x': expected a check"):
        Condition("x", DETECTOR_FEED, (), check=None, still_holds=probe_floor_holds)


def test_a_pump_reading_of_the_output_on_while_not_emitting_commands_it_off_again():
    clock, events = Clock(), []
    monitor = TripMonitor(CFG, started_at=0.0)
    pump = MemoryPump()
    gp = GuardedPump(
        pump,
        clock=clock,
        monitor=monitor,
        max_current=CFG.max_current,
        event_sink=events.append,
        sleep=lambda s: None,
    )
    pump.stuck_on = True  # every off command is accepted and the output stays on
    clock.t = 1.0
    gp.start()
    offs = pump.calls.count(("output", False))
    reading = Block("pump", 0, 1.05, 0.0, -1, (PUMP_ON,), np.array([[1.0]]))
    gp.recommand_off(reading)  # taken within 0.1 s of the off command: not counted
    assert pump.calls.count(("output", False)) == offs
    later = dataclasses.replace(reading, t0=1.2)
    gp.recommand_off(later)
    assert pump.calls.count(("output", False)) > offs
    assert any("output read on while not emitting" in e.who for e in events)
