"""Tests of bench.safety.conditions: each condition detected from blocks, none on normal readings.

Limits come from the built-in bench file's [guard] table (9 A, 0.3 A tolerance, 15-35 degC,
95 % of full scale, 0.5 s stale, 3 failures, 50 % transmission jump). Celsius is converted with
scipy.constants.zero_Celsius (the SI definition: 0 degC = 273.15 K). That a guard trips on an
open interlock, an out-of-window mount temperature, over-current, a saturated detector, lost
communication and stale readings is common practice for laser-diode benches (no source).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.constants import zero_Celsius

from bench.config import load_bench
from bench.records import (
    INTERLOCK,
    MOUNT_TEMP,
    PROBE,
    PUMP_CURRENT,
    PUMP_MONITOR,
    PUMP_ON,
    PUMP_SETPOINT,
    REFERENCE,
    Block,
)
from bench.safety import conditions as tc
from bench.safety.guard import OPERATOR_STOP
from bench.safety.trip_monitor import TripMonitor, settled_mask

CFG = load_bench().guard
PUMP_CHANNELS = (PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON, MOUNT_TEMP, INTERLOCK)
RATE = 100e3  # Hz, the demo digitiser's rate
RANGE = 2.0  # V


def pump_block(t0, current=5.0, setpoint=5.0, on=1.0, temp_c=25.0, interlock=1.0, n=1, dt=0.0, seq=0):
    """A pump block; any argument may be an array of n samples."""
    cols = [
        np.broadcast_to(np.asarray(v, dtype=float), (n,))
        for v in (current, setpoint, on, np.asarray(temp_c, dtype=float) + zero_Celsius, interlock)
    ]
    return Block("pump", seq, t0, dt, -1, PUMP_CHANNELS, np.column_stack(cols))


def detector_stream(n, t0=0.0, probe=0.8, reference=0.6, pump_monitor=0.5, seed=7):
    """Samples at 100 kHz with common intensity noise (2e-3) and detector noise (0.5 mV)."""
    rng = np.random.default_rng(seed)
    common = 1.0 + 2e-3 * rng.standard_normal(n)
    t = t0 + np.arange(n) / RATE
    cols = {
        PROBE: np.asarray(probe) * common + 5e-4 * rng.standard_normal(n),
        REFERENCE: np.asarray(reference) * common + 5e-4 * rng.standard_normal(n),
        PUMP_MONITOR: np.asarray(pump_monitor) + 5e-4 * rng.standard_normal(n),
    }
    return t, cols


def blocks(t, cols, sizes, names=(PROBE, REFERENCE, PUMP_MONITOR)):
    out, start = [], 0
    for seq, size in enumerate(sizes):
        stop = min(start + size, t.shape[0])
        if stop <= start:
            break
        data = np.column_stack([cols[c][start:stop] for c in names])
        out.append(Block("detector", seq, float(t[start]), 1.0 / RATE, start, tuple(names), data))
        start = stop
    return out


def feed_all(monitor, bs, **kwargs):
    found = []
    for b in bs:
        found += monitor.feed_detector(b, RANGE, **kwargs)
    return found


# --------------------------------------------------------------------------------------------
# Normal readings raise nothing


def test_normal_readings_raise_nothing():
    m = TripMonitor(CFG, started_at=0.0)
    found = []
    tt, cols = detector_stream(500_000)  # 5 s of detector data, in 20 ms blocks
    detector = blocks(tt, cols, [2000] * 250)
    for i in range(50):  # the pump polled at 10 Hz, the detector read every 20 ms in between
        t = 0.1 * i
        found += m.feed_pump(
            pump_block(t, current=5.0 + 0.05 * math.sin(i), setpoint=5.0, temp_c=25.0 + 0.1 * i / 50, seq=i),
            output_off_since=None,
        )
        found += m.comm_result("pump", True, t)
        found += feed_all(m, detector[5 * i : 5 * i + 5])
        found += m.comm_result("detector", True, t + 0.09)
        found += m.check_stale(t + 0.099)
    assert found == []
    assert m.active_conditions() == {}


# --------------------------------------------------------------------------------------------
# Each condition from blocks


def test_interlock_open_seen_at_the_first_open_sample():
    m = TripMonitor(CFG)
    il = np.ones(10)
    il[6:] = 0.0
    (c,) = m.feed_pump(pump_block(2.0, interlock=il, n=10, dt=0.01))
    assert c.condition == tc.INTERLOCK_OPEN
    assert c.seen_at == pytest.approx(2.06)
    assert "open" in c.reason


@pytest.mark.parametrize(
    ("temp_c", "trips", "word"),
    [
        (36.0, True, "above"),
        (14.0, True, "below"),
        (34.9, False, ""),
        (15.1, False, ""),
        (float("nan"), True, "not a number"),
    ],
)
def test_mount_temperature_window(temp_c, trips, word):
    m = TripMonitor(CFG)
    found = m.feed_pump(pump_block(1.0, temp_c=temp_c))
    conditions = [c for c in found if c.condition == tc.MOUNT_TEMPERATURE]
    assert bool(conditions) is trips
    if trips:
        assert word in conditions[0].reason


def test_window_edges_are_the_bench_file_values():
    # 15 degC and 35 degC in the bench file are 288.15 K and 308.15 K (SI definition of degC).
    assert CFG.mount_temperature_min == pytest.approx(15.0 + zero_Celsius)
    assert CFG.mount_temperature_max == pytest.approx(35.0 + zero_Celsius)


@pytest.mark.parametrize(
    ("current", "setpoint", "trips"),
    [(9.4, 9.0, True), (9.25, 9.0, False), (5.0, 9.1, True), (float("nan"), 5.0, True)],
)
def test_over_current(current, setpoint, trips):
    m = TripMonitor(CFG)
    found = m.feed_pump(pump_block(1.0, current=current, setpoint=setpoint))
    assert any(c.condition == tc.OVER_CURRENT for c in found) is trips


def test_current_not_following_its_setpoint_after_the_settle_time():
    m = TripMonitor(CFG, settle_time=0.2)
    assert m.feed_pump(pump_block(0.0, current=5.0, setpoint=5.0)) == []
    assert m.feed_pump(pump_block(0.5, current=5.0, setpoint=5.0)) == []
    # setpoint raised to 7 A at t=1.0: the current may lag for 0.2 s
    assert m.feed_pump(pump_block(1.0, current=5.2, setpoint=7.0)) == []
    assert m.feed_pump(pump_block(1.1, current=6.0, setpoint=7.0)) == []
    (c,) = m.feed_pump(pump_block(1.3, current=6.0, setpoint=7.0))
    assert c.condition == tc.CURRENT_NOT_FOLLOWING and c.seen_at == 1.3
    assert "7.000 A" in c.reason


def test_current_flowing_while_the_output_reads_off():
    m = TripMonitor(CFG, settle_time=0.2)
    m.feed_pump(pump_block(0.0, current=0.0, setpoint=5.0, on=0.0))
    (c,) = m.feed_pump(pump_block(1.0, current=1.0, setpoint=5.0, on=0.0))
    assert c.condition == tc.CURRENT_NOT_FOLLOWING and "output reads off" in c.reason


def test_not_following_inside_one_vectorised_block():
    # 1 kHz samples: setpoint step at sample 100, current stuck; trips 0.2 s after the step.
    n = 600
    setpoint = np.where(np.arange(n) < 100, 3.0, 6.0)
    m = TripMonitor(CFG, settle_time=0.2)
    m.feed_pump(pump_block(-1.0, current=3.0, setpoint=3.0))  # history: steady before
    (c,) = m.feed_pump(pump_block(0.0, current=3.0, setpoint=setpoint, n=n, dt=1e-3))
    assert c.seen_at == pytest.approx(0.1 + 0.2)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.tuples(st.floats(0.0, 0.05), st.sampled_from([0.0, 2.0, 5.0])), min_size=1, max_size=60),
    st.floats(0.0, 0.1),
)
def test_settled_mask_matches_a_plain_loop(steps, settle):
    times = np.cumsum([s[0] for s in steps])
    target = np.array([s[1] for s in steps])
    mask, last_target, last_change = settled_mask(times, target, settle, None, -math.inf)
    # slow, obvious reference
    expected, previous, changed_at = [], None, -math.inf
    for t, x in zip(times, target):
        if previous is None or x != previous:
            changed_at = t
        previous = x
        expected.append(t - changed_at >= settle - 1e-9)  # within 1 ns (rounding of sample times)
    assert mask.tolist() == expected
    assert last_target == target[-1] and last_change == changed_at


def test_output_on_after_the_guard_commanded_it_off():
    m = TripMonitor(CFG, settle_time=0.2)
    assert m.feed_pump(pump_block(10.1, current=0.0, on=1.0), output_off_since=10.0) == []  # within grace
    (c,) = [
        x
        for x in m.feed_pump(pump_block(10.5, current=0.0, on=1.0), output_off_since=10.0)
        if x.condition == tc.OUTPUT_UNEXPECTED
    ]
    assert c.seen_at == 10.5
    m2 = TripMonitor(CFG)
    found = m2.feed_pump(pump_block(10.5, on=1.0), output_off_since=None)  # commanded on
    assert not [x for x in found if x.condition == tc.OUTPUT_UNEXPECTED]


def test_output_off_while_the_guard_commands_it_on():
    # another connection, or the driver's own protection, switched the output off
    m = TripMonitor(CFG, settle_time=0.2, lag_allowance=0.1)
    assert m.feed_pump(pump_block(10.1, current=0.0, on=0.0), output_on_since=10.0) == []  # within grace
    found = m.feed_pump(pump_block(10.5, current=0.0, on=0.0), output_on_since=10.0)
    assert [x.condition for x in found] == [tc.OUTPUT_OFF_UNEXPECTED] and found[0].seen_at == 10.5
    assert "commanded it on at t=10.000 s" in found[0].reason
    # commanded off again (the trip): no longer held
    m.feed_pump(pump_block(10.6, current=0.0, on=0.0), output_off_since=10.55)
    assert tc.OUTPUT_OFF_UNEXPECTED not in m.active_conditions()
    # an open interlock explains an output that went off: that is the one condition reported
    m2 = TripMonitor(CFG, settle_time=0.2, lag_allowance=0.1)
    found = m2.feed_pump(pump_block(10.5, current=0.0, on=0.0, interlock=0.0), output_on_since=10.0)
    assert [x.condition for x in found] == [tc.INTERLOCK_OPEN]


@pytest.mark.parametrize(
    ("channel", "value", "trips"),
    [
        (PROBE, 1.92, True),
        (PROBE, 1.85, False),
        (REFERENCE, -1.95, True),
        (PUMP_MONITOR, 2.0, True),
        (PROBE, float("nan"), True),
    ],
)
def test_detector_near_full_scale(channel, value, trips):
    # 95 % of 2 V is 1.9 V.
    t, cols = detector_stream(3000)
    cols[channel] = cols[channel].copy()
    cols[channel][1234] = value
    m = TripMonitor(CFG)
    found = [c for c in feed_all(m, blocks(t, cols, [3000])) if c.condition == tc.NEAR_FULL_SCALE]
    assert bool(found) is trips
    if trips:
        assert found[0].seen_at == pytest.approx(t[1234])
        assert channel in found[0].reason


def test_full_scale_per_channel_ranges():
    t, cols = detector_stream(100, probe=4.0)
    m = TripMonitor(CFG)
    (b,) = blocks(t, cols, [100])
    assert m.feed_detector(b, {PROBE: 5.0, REFERENCE: 2.0, PUMP_MONITOR: 1.0}) == []  # 80 % of 5 V
    with pytest.raises(ValueError, match="full_scale"):
        m.feed_detector(b, {PROBE: 5.0})


def test_comm_failures_trip_after_the_configured_count():
    m = TripMonitor(CFG)
    assert CFG.comm_failures == 3
    assert m.comm_result("pump", False, 1.0, "timeout") == []
    assert m.comm_result("pump", False, 1.1, "timeout") == []
    (c,) = m.comm_result("pump", False, 1.2, "timeout")
    assert c.condition == tc.comm_condition("pump") and "3 consecutive" in c.reason and "timeout" in c.reason
    assert m.comm_result("pump", False, 1.3) == []  # reported once
    assert m.comm_result("pump", True, 1.4) == []
    assert tc.comm_condition("pump") not in m.active_conditions()
    # a success in between resets the count
    m.comm_result("detector", False, 2.0)
    m.comm_result("detector", False, 2.1)
    m.comm_result("detector", True, 2.2)
    assert m.comm_result("detector", False, 2.3) == []


def test_lost_connection_trips_at_once():
    m = TripMonitor(CFG)
    (c,) = m.comm_result("detector", False, 3.0, "connection reset by peer", lost=True)
    assert "lost" in c.reason and c.seen_at == 3.0


def test_stale_readings():
    m = TripMonitor(CFG)
    assert m.check_stale(5.0) == []  # nothing expected before the first reading
    m.feed_pump(pump_block(1.0))
    assert m.check_stale(1.4) == []
    (c,) = m.check_stale(1.6)
    assert c.condition == tc.stale_condition("pump") and c.seen_at == 1.6
    assert m.check_stale(1.7) == []  # reported once
    m.feed_pump(pump_block(1.8))
    assert tc.stale_condition("pump") not in m.active_conditions()
    started = TripMonitor(CFG, started_at=0.0)
    assert {c.condition for c in started.check_stale(0.6)} == {"stale.pump", "stale.detector"}


# --------------------------------------------------------------------------------------------
# Transmission jump


def stepped(factor, at, n=10_000, **kwargs):
    t, cols = detector_stream(n, **kwargs)
    cols[PROBE] = cols[PROBE] * np.where(np.arange(n) >= at, factor, 1.0)
    return t, cols


@pytest.mark.parametrize("at", [5000, 5500, 5999])  # on a window boundary, and inside a window
def test_transmission_jump_detected_wherever_the_step_falls(at):
    t, cols = stepped(1.6, at)  # S up by 60 % (parasitic lasing would show as a sudden change)
    m = TripMonitor(CFG)
    found = feed_all(m, blocks(t, cols, [2000] * 5))
    (c,) = [x for x in found if x.condition == tc.TRANSMISSION_JUMP]
    assert t[at] - 0.01 - 1e-9 <= c.seen_at <= t[at] + 0.01 + 1e-9  # within a window of the step
    assert "changed by 60 %" in c.reason  # the whole step, even when it falls inside a window


def test_transmission_drop_detected_too():
    t, cols = stepped(0.3, 5000)  # a moved optic: S down by 70 %
    m = TripMonitor(CFG)
    assert [x.condition for x in feed_all(m, blocks(t, cols, [2000] * 5))] == [tc.TRANSMISSION_JUMP]


def test_small_change_does_not_trip():
    t, cols = stepped(1.3, 5000)  # 30 %, below the 50 % of the bench file
    assert feed_all(TripMonitor(CFG), blocks(t, cols, [2000] * 5)) == []


def test_no_jump_trip_when_the_pump_changed():
    n = 10_000
    step = np.arange(n) >= 5000
    # The pump monitor shows the pump going up at the same moment: explained, no trip.
    t, cols = stepped(1.6, 5000, pump_monitor=np.where(step, 1.0, 0.5))
    assert feed_all(TripMonitor(CFG), blocks(t, cols, [2000] * 5)) == []
    # No pump monitor channel, but the guard said it changed the pump then.
    t, cols = stepped(1.6, 5000)
    m = TripMonitor(CFG)
    m.note_pump_change(float(t[5000]))
    assert feed_all(m, blocks(t, cols, [2000] * 5, names=(PROBE, REFERENCE))) == []
    # The pipeline says the pump is modulated on purpose (chopped mode).
    assert feed_all(TripMonitor(CFG), blocks(t, cols, [2000] * 5), pump_steady=False) == []


@pytest.mark.parametrize(
    "noted_at", [0.02, 0.08]
)  # command before the step, and after it by the readings' clock
def test_commanded_change_excuses_a_jump_within_the_lag_allowance(noted_at):
    # The step shows in the readings at 0.05 s; the guard noted its command at ``noted_at``:
    # a command reaches the driver late, and a digitiser's time stamps can be off from the
    # guard's clock (common practice, no source). Without the allowance the step trips.
    t, cols = stepped(1.6, 5000)
    strict = TripMonitor(CFG, settle_time=0.005, lag_allowance=0.0)
    strict.note_pump_change(noted_at)
    assert [x.condition for x in feed_all(strict, blocks(t, cols, [2000] * 5, names=(PROBE, REFERENCE)))] == [
        tc.TRANSMISSION_JUMP
    ]
    allowing = TripMonitor(CFG, settle_time=0.005, lag_allowance=0.04)
    allowing.note_pump_change(noted_at)
    assert feed_all(allowing, blocks(t, cols, [2000] * 5, names=(PROBE, REFERENCE))) == []


def test_lag_allowance_must_be_a_time():
    with pytest.raises(ValueError, match="lag_allowance"):
        TripMonitor(CFG, lag_allowance=-1.0)


def test_no_jump_trip_when_the_probe_is_blocked_for_a_dark():
    n = 10_000
    blocked = np.arange(n) >= 5000
    t, cols = detector_stream(n, probe=np.where(blocked, 0.003, 0.8), reference=np.where(blocked, 0.002, 0.6))
    assert feed_all(TripMonitor(CFG), blocks(t, cols, [2000] * 5)) == []


def test_jump_check_off_when_not_configured():
    cfg = dataclasses.replace(CFG, transmission_jump=None)
    t, cols = stepped(1.6, 5000)
    assert feed_all(TripMonitor(cfg), blocks(t, cols, [2000] * 5)) == []


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(1, 3000), min_size=1, max_size=40), st.integers(2000, 8000))
def test_same_trip_whole_or_in_pieces(sizes, at):
    # As a reply parser is fed whole and in pieces, the monitor must see the same stream the same way.
    t, cols = stepped(1.6, at, n=10_000)
    whole = feed_all(TripMonitor(CFG), blocks(t, cols, [10_000]))
    total = sum(sizes)
    sizes = sizes + [10_000] if total < 10_000 else sizes
    pieces = feed_all(TripMonitor(CFG), blocks(t, cols, sizes))
    assert [c.seen_at for c in whole] == pytest.approx([c.seen_at for c in pieces])
    assert len(whole) == 1


def test_a_gap_between_blocks_does_not_compare_across_it():
    t, cols = stepped(1.6, 5000)
    bs = blocks(t, cols, [2000] * 5)
    gapped = bs[:2] + bs[3:]  # block 2 (samples 4000-5999) lost
    found = feed_all(TripMonitor(CFG), gapped)
    assert found == []  # windows across the gap are not consecutive: no comparison


# --------------------------------------------------------------------------------------------
# Reported once, and judged cleared on fresh readings


def test_reported_once_then_again_after_it_cleared():
    m = TripMonitor(CFG)
    assert len(m.feed_pump(pump_block(1.0, interlock=0.0))) == 1
    assert m.feed_pump(pump_block(1.1, interlock=0.0)) == []
    assert m.feed_pump(pump_block(1.2, interlock=1.0)) == []
    assert len(m.feed_pump(pump_block(1.3, interlock=0.0))) == 1


def test_why_still_holds_needs_fresh_readings_after_the_trip():
    m = TripMonitor(CFG)
    (c,) = m.feed_pump(pump_block(1.0, interlock=0.0))
    assert m.why_still_holds(tc.INTERLOCK_OPEN, now=1.05, since=c.seen_at) == c.reason  # still active
    m.feed_pump(pump_block(1.2, interlock=1.0))
    assert m.why_still_holds(tc.INTERLOCK_OPEN, now=1.3, since=c.seen_at) is None
    assert m.condition_cleared(tc.INTERLOCK_OPEN, now=1.3, since=c.seen_at)
    assert "since the trip" in m.why_still_holds(tc.INTERLOCK_OPEN, now=1.3, since=1.25)
    assert "old" in m.why_still_holds(tc.INTERLOCK_OPEN, now=2.0, since=c.seen_at)  # 0.8 s > 0.5 s


def test_clearance_of_each_kind_of_condition():
    m = TripMonitor(CFG)
    m.feed_pump(pump_block(1.0, current=5.0, setpoint=5.0, on=0.0, temp_c=40.0))
    assert "above its window" in m.why_still_holds(tc.MOUNT_TEMPERATURE, 1.1, since=0.9)  # 40 degC, active
    m.feed_pump(pump_block(1.2, current=0.0, setpoint=5.0, on=0.0, temp_c=30.0))
    for condition in (tc.MOUNT_TEMPERATURE, tc.OVER_CURRENT, tc.CURRENT_NOT_FOLLOWING, tc.OUTPUT_UNEXPECTED):
        assert m.why_still_holds(condition, 1.3, since=1.1) is None, condition
    m.comm_result("pump", False, 1.0)
    assert "still fail" in m.why_still_holds(tc.comm_condition("pump"), 1.3, since=0.9)
    m.comm_result("pump", True, 1.25)
    assert m.why_still_holds(tc.comm_condition("pump"), 1.3, since=0.9) is None
    assert m.why_still_holds(tc.stale_condition("pump"), 1.3, since=1.1) is None
    assert m.why_still_holds(tc.stale_condition("detector"), 1.3) == "no detector reading yet"
    assert m.why_still_holds(OPERATOR_STOP, 1.3) is None
    assert m.why_still_holds(tc.TRANSMISSION_JUMP, 1.3) is None
    assert "cannot tell" in m.why_still_holds("something_else", 1.3)
    t, cols = detector_stream(100, t0=1.2)
    (b,) = blocks(t, cols, [100])
    m.feed_detector(b, RANGE)
    assert m.why_still_holds(tc.NEAR_FULL_SCALE, 1.3, since=1.1) is None
    cols[PROBE][50] = 1.99
    (b,) = blocks(t, cols, [100])
    m.feed_detector(b, RANGE)
    assert m.why_still_holds(tc.NEAR_FULL_SCALE, 1.3, since=1.1)


def test_pure_check_validation_names_the_argument():
    with pytest.raises(ValueError, match="times"):
        tc.check_interlock([0.0, 1.0], [1.0])
    with pytest.raises(ValueError, match="low, high"):
        tc.check_mount_temperature([0.0], [300.0], 310.0, 290.0)
    with pytest.raises(ValueError, match="max_current"):
        tc.check_over_current([0.0], [1.0], None, -1.0, 0.1)
    with pytest.raises(ValueError, match="fraction"):
        tc.check_full_scale([0.0], {PROBE: [0.1]}, {PROBE: 2.0}, 1.5)
    with pytest.raises(ValueError, match="cfg"):
        TripMonitor(object())  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="block"):
        TripMonitor(CFG).feed_pump("not a block")  # type: ignore[arg-type]
