"""Tests of bench.safety.guarded_pump.GuardedPump with a fake pump driver and a fake shutter (no sockets).

What is checked comes from the rules of the trade: the output is off at start and on every
exit path, a failed off command is retried and backed up by a shutter and a loud fault, and
emission needs arming (ANSI Z136.1 section 4 control measures for class 3B / 4, from memory;
IEC 60204-1 9.2.3.4: a reset does not restart, from memory). Fail-safe retry counts and
deadlines are common practice, no source.
"""

from __future__ import annotations

import logging
import threading
import uuid

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bench.config import load_bench
from bench.records import (
    INTERLOCK,
    MOUNT_TEMP,
    PUMP_CURRENT,
    PUMP_ON,
    PUMP_SETPOINT,
    Block,
)
from bench.safety import guard as g
from bench.safety.checklist import ChecklistResult
from bench.safety.conditions import INTERLOCK_OPEN
from bench.safety.guarded_pump import GuardedPump
from bench.safety.trip_monitor import TripMonitor


class FakeClock:
    def __init__(self, t: float = 1000.0) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t

    def advance(self, dt: float) -> None:
        self.t += dt


class FakePump:
    """A pump driver in memory. ``fail_off`` off commands raise; ``stuck_on`` ignores off."""

    def __init__(self, clock: FakeClock | None = None, command_time: float = 0.0) -> None:
        self.on = True  # left on by a previous session: start() must switch it off
        self.interlock = True
        self.temperature = 298.15
        self.setpoint = 0.0
        self.fail_off = 0
        self.fail_on = False
        self.stuck_on = False
        self.calls: list[tuple[str, object]] = []
        self.clock = clock
        self.command_time = command_time
        self.on_while: list[str] = []  # guard state seen each time the output went on
        self.guarded: GuardedPump | None = None

    def output(self, on: bool) -> None:
        self.calls.append(("output", on))
        if self.clock is not None:
            self.clock.advance(self.command_time)
        if not on and self.fail_off > 0:
            self.fail_off -= 1
            raise TimeoutError("simulated: no reply before the timeout")
        if on and self.fail_on:
            raise ConnectionError("simulated: connection lost")
        if on and not self.interlock:
            raise RuntimeError('201,"Interlock open"')
        if on or not self.stuck_on:
            self.on = on
        if on and self.guarded is not None:
            self.on_while.append(self.guarded.state)

    def output_is_on(self) -> bool:
        return self.on

    def interlock_closed(self) -> bool:
        return self.interlock

    def mount_temperature(self) -> float:
        return self.temperature

    def measured_current(self) -> float:
        return self.setpoint if self.on else 0.0

    def current_setpoint(self) -> float:
        return self.setpoint

    def set_current(self, current: float) -> None:
        self.calls.append(("set_current", current))
        self.setpoint = current


class FakeShutter:
    def __init__(self, fail: bool = False) -> None:
        self.closed: set[str] = set()
        self.calls: list[tuple[str, str]] = []
        self.fail = fail

    def close_shutter(self, name: str) -> None:
        self.calls.append(("close", name))
        if self.fail:
            raise OSError("simulated: shutter controller not answering")
        self.closed.add(name)

    def open_shutter(self, name: str) -> None:
        self.calls.append(("open", name))
        self.closed.discard(name)


def checklist(at: float, operator: str = "ana") -> ChecklistResult:
    return ChecklistResult(True, [], [], operator, at, uuid.uuid4().hex)


def make(**kwargs):
    clock = kwargs.pop("clock", None) or FakeClock()
    pump = kwargs.pop("pump", None) or FakePump(clock)
    events: list = []
    gp = GuardedPump(
        pump,
        g.Guard(),
        clock=clock,
        event_sink=events.append,
        sleep=lambda s: None,
        max_current=9.0,
        **kwargs,
    )
    pump.guarded = gp
    return gp, pump, clock, events


def arm_and_emit(gp: GuardedPump, clock: FakeClock) -> None:
    gp.arm(checklist(clock()))
    gp.emit("ana")


# --------------------------------------------------------------------------------------------
# Off at start and on every exit


def test_start_commands_output_off_and_closes_the_pump_shutter():
    shutter = FakeShutter()
    gp, pump, clock, events = make(shutter=shutter)
    assert pump.on  # left on
    gp.start()
    assert not pump.on and pump.calls[0] == ("output", False)
    assert "pump" in shutter.closed
    assert events[0].kind == "guard" and events[0].data["to"] == g.SAFE


def test_context_manager_switches_off_on_normal_exit():
    gp, pump, clock, events = make()
    with gp:
        arm_and_emit(gp, clock)
        assert pump.on and gp.state == g.EMITTING
    assert not pump.on
    assert events[-1].data["event"] == "Shutdown" and "normal exit" in events[-1].text


def test_context_manager_switches_off_on_exception_and_lets_it_through():
    gp, pump, clock, events = make()
    with pytest.raises(ZeroDivisionError):
        with gp:
            arm_and_emit(gp, clock)
            _ = 1 / 0
    assert not pump.on
    assert "ZeroDivisionError" in events[-1].text


def test_context_manager_switches_off_on_ctrl_c():
    gp, pump, clock, events = make()
    with pytest.raises(KeyboardInterrupt):
        with gp:
            arm_and_emit(gp, clock)
            raise KeyboardInterrupt
    assert not pump.on
    assert "Ctrl-C" in events[-1].text


def test_no_arming_after_shutdown():
    gp, pump, clock, events = make()
    with gp:
        pass
    with pytest.raises(g.GuardRefused, match="shut down"):
        gp.arm(checklist(clock()))


# --------------------------------------------------------------------------------------------
# Failed off commands


def test_off_command_retried_until_it_works():
    gp, pump, clock, events = make(shutter=FakeShutter())
    gp.start()
    arm_and_emit(gp, clock)
    pump.fail_off = 2  # two timeouts, then it works
    out = gp.stop_emission("ana")
    assert not pump.on and gp.state == g.ARMED
    assert out.event.data["off_attempts"] == 3 and out.event.data["pump_off_ok"] is True
    assert not [e for e in events if e.kind == "fault"]


def test_off_command_failure_closes_the_shutter_and_is_logged_loudly(caplog):
    shutter = FakeShutter()
    gp, pump, clock, events = make(shutter=shutter, off_attempts=3)
    gp.start()
    arm_and_emit(gp, clock)
    assert "pump" not in shutter.closed  # opened for emission
    pump.fail_off = 1000
    with caplog.at_level(logging.CRITICAL, logger="bench.safety.guard"):
        gp.trip("operator pressed stop", seen_at=clock())
    assert "pump" in shutter.closed
    offs = [c for c in pump.calls if c == ("output", False)]
    assert len(offs) >= 3  # retried (the follow-up trip tries again)
    faults = [e for e in events if e.kind == "fault"]
    assert faults and "OFF COMMAND FAILED" in faults[0].text and faults[0].data["shutter_closed"] is True
    assert any(
        r.levelno == logging.CRITICAL and "OFF COMMAND FAILED" in r.getMessage() for r in caplog.records
    )
    assert gp.state == g.TRIPPED and g.PUMP_OFF_FAILED in gp.held
    trip = [e for e in events if e.kind == "trip"][0]
    assert trip.data["pump_off_ok"] is False and trip.data["latency_s"] is None


def test_stop_whose_off_command_fails_trips_the_guard():
    gp, pump, clock, events = make(shutter=FakeShutter())
    gp.start()
    arm_and_emit(gp, clock)
    pump.fail_off = 1000
    gp.stop_emission("ana")
    assert gp.state == g.TRIPPED and g.PUMP_OFF_FAILED in gp.held
    # Acknowledging needs the output to read off again (read from the driver: no monitor here).
    with pytest.raises(g.GuardRefused, match="still reads on"):
        gp.acknowledge("ana")
    pump.fail_off = 0
    pump.on = False  # switched off at the driver by hand
    assert gp.acknowledge("ana").after == g.SAFE


def test_output_that_stays_on_counts_as_a_failed_off_command():
    gp, pump, clock, events = make()  # no shutter configured
    gp.start()
    arm_and_emit(gp, clock)
    pump.stuck_on = True  # the driver accepts OUTP OFF but the output stays on
    gp.trip("test", seen_at=clock())
    faults = [e for e in events if e.kind == "fault"]
    assert faults and "still reads on" in faults[0].text
    assert "no pump shutter is configured" in faults[0].text


def test_retries_stop_at_the_deadline():
    clock = FakeClock()
    pump = FakePump(clock, command_time=0.3)  # each command takes 0.3 s
    gp, pump, clock, events = make(clock=clock, pump=pump, off_attempts=10, off_deadline=0.5)
    pump.fail_off = 1000
    gp.start()
    first_round = [e for e in events if e.kind == "fault"][0]
    assert first_round.data["attempts"] == 2  # 0.3 s, 0.6 s > 0.5 s deadline


def test_shutter_that_fails_to_close_is_a_fault_too():
    gp, pump, clock, events = make(shutter=FakeShutter(fail=True))
    gp.start()
    assert any(e.kind == "fault" and "SHUTTER FAILED" in e.text for e in events)
    assert not pump.on  # the pump itself is off


def test_a_failing_event_sink_never_keeps_the_pump_on(caplog):
    clock = FakeClock()
    pump = FakePump(clock)

    def broken(event):
        raise OSError("disk full")

    gp = GuardedPump(pump, g.Guard(), clock=clock, event_sink=broken, sleep=lambda s: None)
    with caplog.at_level(logging.CRITICAL, logger="bench.safety.guard"):
        gp.start()
        gp.arm(checklist(clock()))
        gp.emit("ana")
        gp.trip("test", seen_at=clock())
    assert not pump.on and gp.state == g.TRIPPED
    assert any("event sink failed" in r.getMessage() for r in caplog.records)


# --------------------------------------------------------------------------------------------
# Emission needs arming, and the checks just before it


def test_emission_refused_while_safe_or_tripped():
    gp, pump, clock, events = make()
    gp.start()
    with pytest.raises(g.GuardRefused, match="not armed"):
        gp.emit("ana")
    gp.arm(checklist(clock()))
    gp.trip("test", seen_at=clock())
    with pytest.raises(g.GuardRefused, match="tripped"):
        gp.emit("ana")
    assert ("output", True) not in pump.calls


def test_interlock_open_just_before_emission_trips_instead():
    gp, pump, clock, events = make()
    gp.start()
    gp.arm(checklist(clock()))
    pump.interlock = False
    with pytest.raises(g.GuardRefused, match="interlock"):
        gp.emit("ana")
    assert gp.state == g.TRIPPED and INTERLOCK_OPEN in gp.held
    assert ("output", True) not in pump.calls


def test_failed_on_command_trips():
    shutter = FakeShutter()
    gp, pump, clock, events = make(shutter=shutter)
    gp.start()
    gp.arm(checklist(clock()))
    pump.fail_on = True
    with pytest.raises(g.GuardRefused, match="could not be switched on"):
        gp.emit("ana")
    assert gp.state == g.TRIPPED and g.PUMP_COMMAND_FAILED in gp.held
    assert "pump" in shutter.closed and not pump.on


def test_emission_opens_the_shutter_before_the_pump_goes_on():
    shutter = FakeShutter()
    gp, pump, clock, events = make(shutter=shutter)
    gp.start()
    arm_and_emit(gp, clock)
    assert shutter.calls[-1] == ("open", "pump") and pump.calls[-1] == ("output", True)
    assert pump.on_while == [g.EMITTING]


def test_set_current_refused_above_the_limit():
    gp, pump, clock, events = make()
    with pytest.raises(g.GuardRefused, match="above the limit"):
        gp.set_current(9.5)
    gp.set_current(4.0, who="ana")
    assert pump.setpoint == 4.0 and events[-1].kind == "setting"
    with pytest.raises(ValueError, match="current"):
        gp.set_current(float("nan"))


def test_from_config_takes_the_lower_current_limit():
    cfg = load_bench()
    gp = GuardedPump.from_config(FakePump(), cfg)
    assert gp.max_current == min(cfg.guard.max_current, cfg.pump.max_current)


# --------------------------------------------------------------------------------------------
# Trips with a monitor, latency, acknowledgement


def pump_block(t: float, interlock: float = 1.0, on: float = 0.0) -> Block:
    data = np.array([[0.0 if not on else 3.0, 3.0, on, 298.15, interlock]])
    return Block("pump", 0, t, 0.0, -1, (PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON, MOUNT_TEMP, INTERLOCK), data)


def test_trip_latency_from_seen_at_to_off_command_completed():
    clock = FakeClock(50.0)
    pump = FakePump(clock, command_time=0.004)  # the off command takes 4 ms
    gp, pump, clock, events = make(clock=clock, pump=pump)
    gp.start()
    arm_and_emit(gp, clock)
    seen_at = clock() - 0.010  # the reading was taken 10 ms before the trip is handled
    out = gp.trip("hardware interlock reads open", INTERLOCK_OPEN, seen_at=seen_at)
    assert out.event.data["latency_s"] == pytest.approx(0.014, abs=1e-9)
    assert gp.trip_latencies[-1] == pytest.approx(0.014, abs=1e-9)


def test_acknowledge_refused_until_fresh_readings_show_the_condition_cleared():
    cfg = load_bench()
    clock = FakeClock(10.0)
    monitor = TripMonitor(cfg.guard)
    gp, pump, clock, events = make(clock=clock, monitor=monitor)
    gp.start()
    arm_and_emit(gp, clock)
    gp.trip_on(
        monitor.feed_pump(pump_block(clock(), interlock=0.0, on=1.0), output_off_since=gp.output_off_since)
    )
    assert gp.state == g.TRIPPED and not pump.on
    with pytest.raises(g.GuardRefused, match="interlock"):
        gp.acknowledge("ana")
    clock.advance(0.1)
    monitor.feed_pump(pump_block(clock(), interlock=1.0), output_off_since=gp.output_off_since)
    out = gp.acknowledge("ana")
    assert out.after == g.SAFE and not pump.on  # back to safe, not to emitting
    # a stale reading would not have been enough
    gp.arm(checklist(clock()))
    gp.emit("ana")
    gp.trip_on(monitor.feed_pump(pump_block(clock.t + 0.01, interlock=0.0, on=1.0)))
    clock.advance(0.1)
    monitor.feed_pump(pump_block(clock(), interlock=1.0))
    clock.advance(5.0)  # then nothing for 5 s (stale_after is 0.5 s)
    with pytest.raises(g.GuardRefused, match="old"):
        gp.acknowledge("ana")


def test_active_monitor_condition_blocks_emission():
    cfg = load_bench()
    monitor = TripMonitor(cfg.guard)
    gp, pump, clock, events = make(monitor=monitor)
    gp.start()
    gp.arm(checklist(clock()))
    hot = pump_block(clock())
    hot.data[0, 3] = 320.0  # mount at 47 degC
    monitor.feed_pump(hot)  # reported, but suppose the pipeline lost it
    with pytest.raises(g.GuardRefused, match="mount temperature"):
        gp.emit("ana")
    assert gp.state == g.TRIPPED and ("output", True) not in pump.calls


def test_every_transition_is_recorded_once():
    gp, pump, clock, events = make()
    gp.start()
    arm_and_emit(gp, clock)
    gp.stop_emission("ana")
    gp.disarm("ana")
    kinds = [e.data.get("event") for e in events]
    assert kinds == ["Start", "Arm", "Emit", "StopEmission", "Disarm"]
    assert all(e.t == clock() for e in events)


# --------------------------------------------------------------------------------------------
# Threads and random use


def test_two_threads_never_switch_on_outside_emitting():
    gp, pump, clock, events = make()
    gp.start()
    errors: list[BaseException] = []

    def operator() -> None:
        try:
            for _ in range(200):
                try:
                    gp.arm(checklist(clock()))
                    gp.emit("ana")
                except g.GuardRefused:
                    pass
                gp.stop_emission("ana")
                gp.disarm("ana")
        except BaseException as exc:  # report to the main thread
            errors.append(exc)

    def pipeline() -> None:
        try:
            for _ in range(200):
                gp.trip("test", seen_at=clock())
                try:
                    gp.acknowledge("ana")
                except g.GuardRefused:
                    pass
        except BaseException as exc:  # report to the main thread
            errors.append(exc)

    threads = [threading.Thread(target=operator), threading.Thread(target=pipeline)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
        assert not t.is_alive()
    assert not errors
    assert set(pump.on_while) <= {g.EMITTING}
    gp.shutdown()
    assert not pump.on


# Arming and emitting are listed twice so that random sequences often reach emission.
OPS = st.lists(
    st.sampled_from(
        ["arm", "emit", "arm", "emit", "stop", "disarm", "trip", "ack", "fail_off", "heal", "interlock"]
    ),
    max_size=30,
)


@settings(max_examples=300, deadline=None)
@given(OPS)
def test_random_use_never_leaves_the_pump_on_outside_emitting(ops):
    shutter = FakeShutter()
    gp, pump, clock, events = make(shutter=shutter)
    gp.start()
    for op in ops:
        clock.advance(1.0)
        try:
            if op == "arm":
                gp.arm(checklist(clock()))
            elif op == "emit":
                gp.emit("ana")
            elif op == "stop":
                gp.stop_emission()
            elif op == "disarm":
                gp.disarm()
            elif op == "trip":
                gp.trip("test", seen_at=clock())
            elif op == "ack":
                gp.acknowledge("ana")
            elif op == "fail_off":
                pump.fail_off = 1000
            elif op == "heal":
                pump.fail_off = 0
            else:
                pump.interlock = not pump.interlock
        except g.GuardRefused:
            pass
        assert set(pump.on_while) <= {g.EMITTING}
        if pump.on and gp.state != g.EMITTING:
            # only when the off command failed: then the failure is held and the shutter closed
            assert g.PUMP_OFF_FAILED in gp.held and "pump" in shutter.closed
        if gp.state == g.TRIPPED:
            assert gp.trip_reason


def test_shutdown_tells_the_monitor_that_the_pump_changed():
    # Switching the pump off at exit changes the probe's transmission (the gain goes): that is
    # expected and must not read as a parasitic-lasing trip (common practice, no source).
    cfg = load_bench()
    clock = FakeClock(10.0)
    monitor = TripMonitor(cfg.guard, settle_time=0.005, lag_allowance=0.01)
    gp, pump, clock, events = make(clock=clock, monitor=monitor)
    gp.start()
    arm_and_emit(gp, clock)
    clock.advance(1.0)
    t_off = clock()
    gp.shutdown(reason="exit")
    assert jumps(feed_drop(monitor, t_off)) == []


def feed_drop(monitor, t_off: float) -> list:
    """Detector readings around ``t_off`` whose S falls by 69 % 2 ms after it; what they raise."""
    from bench.records import PROBE as P
    from bench.records import REFERENCE as R

    rate, n = 100e3, 4000
    t = t_off - 0.02 + np.arange(n) / rate
    probe = np.where(t >= t_off + 0.002, 0.5, 1.6)
    data = np.column_stack([probe, np.full(n, 0.6)])
    found = []
    for k in range(0, n, 1000):
        found += monitor.feed_detector(
            Block("detector", k, float(t[k]), 1 / rate, k, (P, R), data[k : k + 1000]), 2.0
        )
    return found


def jumps(found: list) -> list:
    from bench.safety.conditions import TRANSMISSION_JUMP

    return [c for c in found if c.condition == TRANSMISSION_JUMP]


def test_readings_that_arrive_while_the_off_command_runs_are_not_a_jump():
    # A reader thread hands over a block showing the pump's effect before the (slow) off
    # command has returned: the change was noted before the command was sent.
    cfg = load_bench()
    clock = FakeClock(10.0)
    monitor = TripMonitor(cfg.guard, settle_time=0.005, lag_allowance=0.01)
    seen: list = []

    class ReadDuringOff(FakePump):
        def output(self, on: bool) -> None:
            super().output(on)
            if not on:
                seen.extend(feed_drop(monitor, self.clock()))

    gp, pump, clock, events = make(clock=clock, pump=ReadDuringOff(clock), monitor=monitor)
    gp.start()
    arm_and_emit(gp, clock)
    clock.advance(1.0)
    seen.clear()
    gp.stop_emission("ana")
    assert jumps(seen) == []
