"""Tests of bench.safety.guard: the transition table, every (state, event) pair, arming rules, events.

The expected behaviour is written out here independently of the table in bench.safety.guard. The
rules it encodes:
- a trip is reset only by a deliberate act, and the reset itself never restarts emission
  (IEC 60204-1:2016 9.2.3.4 / ISO 13849-1:2015 5.2.2 manual reset; clause numbers from memory);
- class 3B / class 4 emission needs a deliberate action and interlocks (ANSI Z136.1, section 4
  control measures; from memory);
- a request to switch the pump off is never refused (common practice, no source).
"""

from __future__ import annotations

import itertools
import uuid
from dataclasses import dataclass, field

import pytest

from bench.records import EVENT_KINDS
from bench.safety import guard as g
from bench.safety.checklist import ChecklistResult

OFF = {g.PumpOff()}
OFF_SHUTTER = {g.PumpOff(), g.CloseShutter("pump")}
ON = {g.OpenShutter("pump"), g.PumpOn()}


def passed(at: float, operator: str = "ana") -> ChecklistResult:
    return ChecklistResult(True, [], [], operator, at, uuid.uuid4().hex)


def failed(at: float, operator: str = "ana") -> ChecklistResult:
    return ChecklistResult(
        False, ["eyewear OD 3 at 940 nm is below the OD 4 required"], [], operator, at, uuid.uuid4().hex
    )


@dataclass
class Driven:
    """A guard brought into one state, with a clock."""

    guard: g.Guard
    now: float = 100.0
    outcomes: list[g.Outcome] = field(default_factory=list)

    def do(self, event: object, dt: float = 1.0) -> g.Outcome:
        self.now += dt
        out = self.guard.handle(event, self.now)
        self.outcomes.append(out)
        return out


def drive(state: str) -> Driven:
    d = Driven(g.Guard())
    if state in (g.ARMED, g.EMITTING):
        assert d.do(g.Arm(passed(d.now + 0.5), "ana")).accepted
    if state == g.EMITTING:
        assert d.do(g.Emit("ana")).accepted
    if state == g.TRIPPED:
        assert d.do(g.Trip("interlock open", "interlock_open", d.now)).accepted
    assert d.guard.state == state
    return d


def event_for(kind: type, d: Driven) -> object:
    """One representative event of each type, valid in itself (a named person, a held condition)."""
    return {
        g.Start: g.Start(),
        g.Arm: g.Arm(passed(d.now + 0.5), "ana"),
        g.Disarm: g.Disarm("ana"),
        g.Emit: g.Emit("ana"),
        g.StopEmission: g.StopEmission("ana"),
        g.Trip: g.Trip("mount too hot", "mount_temperature", d.now),
        g.ConditionCleared: g.ConditionCleared("interlock_open"),
        g.Acknowledge: g.Acknowledge("ana"),
        g.Shutdown: g.Shutdown(),
    }[kind]


S, A, E, T = g.SAFE, g.ARMED, g.EMITTING, g.TRIPPED
#: (state, event) -> (accepted, state after, actions). Written from the rules, not from bench.safety.guard.
EXPECTED = {
    (S, g.Start): (True, S, OFF_SHUTTER),
    (S, g.Arm): (True, A, set()),
    (S, g.Disarm): (True, S, OFF),
    (S, g.Emit): (False, S, set()),
    (S, g.StopEmission): (True, S, OFF),
    (S, g.Trip): (True, T, OFF_SHUTTER),
    (S, g.ConditionCleared): (False, S, set()),
    (S, g.Acknowledge): (False, S, set()),
    (S, g.Shutdown): (True, S, OFF_SHUTTER),
    (A, g.Start): (True, S, OFF_SHUTTER),
    (A, g.Arm): (False, A, set()),
    (A, g.Disarm): (True, S, OFF_SHUTTER),
    (A, g.Emit): (True, E, ON),
    (A, g.StopEmission): (True, A, OFF),
    (A, g.Trip): (True, T, OFF_SHUTTER),
    (A, g.ConditionCleared): (False, A, set()),
    (A, g.Acknowledge): (False, A, set()),
    (A, g.Shutdown): (True, S, OFF_SHUTTER),
    (E, g.Start): (True, S, OFF_SHUTTER),
    (E, g.Arm): (False, E, set()),
    (E, g.Disarm): (True, S, OFF_SHUTTER),
    (E, g.Emit): (False, E, set()),
    (E, g.StopEmission): (True, A, OFF),
    (E, g.Trip): (True, T, OFF_SHUTTER),
    (E, g.ConditionCleared): (False, E, set()),
    (E, g.Acknowledge): (False, E, set()),
    (E, g.Shutdown): (True, S, OFF_SHUTTER),
    (T, g.Start): (True, T, OFF_SHUTTER),
    (T, g.Arm): (False, T, set()),
    (T, g.Disarm): (True, T, OFF),
    (T, g.Emit): (False, T, set()),
    (T, g.StopEmission): (True, T, OFF),
    (T, g.Trip): (True, T, OFF_SHUTTER),
    (T, g.ConditionCleared): (True, T, set()),  # the held condition cleared; still tripped
    (T, g.Acknowledge): (False, T, set()),  # refused: the condition has not cleared
    (T, g.Shutdown): (True, T, OFF_SHUTTER),
}


def test_expected_covers_every_pair_and_so_does_the_table():
    pairs = set(itertools.product(g.STATES, g.EVENT_TYPES))
    assert set(EXPECTED) == pairs
    for state in g.STATES:
        assert set(g.TRANSITIONS[state]) == set(g.EVENT_TYPES), state


@pytest.mark.parametrize(
    ("state", "kind"),
    sorted(EXPECTED, key=lambda p: (p[0], p[1].__name__)),
    ids=lambda x: x if isinstance(x, str) else x.__name__,
)
def test_every_state_event_pair(state, kind):
    accepted, after, actions = EXPECTED[(state, kind)]
    d = drive(state)
    event = event_for(kind, d)
    out = d.do(event)
    assert out.accepted is accepted
    assert out.before == state
    assert out.after == after == d.guard.state
    assert set(out.actions) == actions
    if not accepted:
        assert out.refusal and len(out.refusal) > 10  # a reason a person can read
        assert out.actions == ()
    # Every event handled yields an Event with time, from, to, reason and who.
    ev = out.event
    assert ev.kind in EVENT_KINDS
    assert ev.kind == ("trip" if kind is g.Trip else "guard")
    assert ev.t == d.now
    assert ev.data["from"] == state and ev.data["to"] == after
    assert ev.data["reason"]
    assert ev.data["accepted"] is accepted
    assert ev.who == event.who


@pytest.mark.parametrize("state", g.STATES)
def test_pump_on_only_from_armed_by_emit(state):
    # No path commands emission while tripped or safe (ANSI Z136.1 deliberate action, from memory).
    for kind in g.EVENT_TYPES:
        d = drive(state)
        out = d.do(event_for(kind, d))
        if g.PumpOn() in out.actions:
            assert (state, kind) == (g.ARMED, g.Emit)


def test_off_requests_are_never_refused():
    # Common practice, no source: "stop" always works.
    for state, kind in itertools.product(g.STATES, (g.Start, g.Disarm, g.StopEmission, g.Trip, g.Shutdown)):
        d = drive(state)
        out = d.do(event_for(kind, d))
        assert out.accepted, (state, kind)
        assert g.PumpOff() in out.actions


def test_acknowledge_refused_until_condition_cleared_then_safe_never_emitting():
    d = drive(g.TRIPPED)
    refused = d.do(g.Acknowledge("ana"))
    assert not refused.accepted
    assert "interlock_open" in refused.refusal and "still holds" in refused.refusal
    assert d.do(g.ConditionCleared("interlock_open", detail="reads closed")).accepted
    assert d.guard.state == g.TRIPPED  # clearing alone does not leave tripped (manual reset)
    out = d.do(g.Acknowledge("ana"))
    assert out.accepted and out.after == g.SAFE  # IEC 60204-1: reset does not restart
    assert g.PumpOn() not in out.actions
    assert d.guard.trip_reason is None and not d.guard.held
    # and emission now needs a new checklist and arming
    assert not d.do(g.Emit("ana")).accepted


def test_every_held_condition_must_clear():
    d = drive(g.EMITTING)
    d.do(g.Trip("interlock open", "interlock_open", d.now))
    second = d.do(g.Trip("mount 40 degC", "mount_temperature", d.now))
    assert second.accepted and second.event.kind == "trip"
    assert set(d.guard.held) == {"interlock_open", "mount_temperature"}
    assert d.guard.trip_reason == "interlock open"  # the first reason is the one held
    d.do(g.ConditionCleared("interlock_open"))
    out = d.do(g.Acknowledge("ana"))
    assert not out.accepted and "mount_temperature" in out.refusal
    assert not d.do(g.ConditionCleared("not_held")).accepted
    d.do(g.ConditionCleared("mount_temperature"))
    assert d.do(g.Acknowledge("ana")).after == g.SAFE


def test_trip_event_carries_condition_and_seen_at():
    d = drive(g.EMITTING)
    out = d.do(g.Trip("pump current 9.6 A above 9 A", "over_current", seen_at=101.25))
    assert out.event.kind == "trip"
    assert out.event.data["condition"] == "over_current"
    assert out.event.data["seen_at"] == 101.25
    assert "9.6 A" in out.event.text


@pytest.mark.parametrize(
    ("make", "words"),
    [
        (lambda d: g.Arm(failed(d.now), "ana"), "did not pass"),
        (lambda d: g.Arm(passed(d.now + 5.0), "ana"), "different clocks"),  # dated after now
        (lambda d: g.Arm(passed(d.now - 1000.0), "ana"), "old"),  # older than 900 s
        (lambda d: g.Arm(passed(d.now), "  "), "name the person"),
        (lambda d: g.Arm("yes", "ana"), "no arming checklist result"),
    ],
)
def test_arming_refusals(make, words):
    d = drive(g.SAFE)
    out = d.do(make(d), dt=0.0)
    assert not out.accepted and d.guard.state == g.SAFE
    assert words in out.refusal


def test_a_checklist_result_arms_once_only():
    d = drive(g.SAFE)
    result = passed(d.now + 0.5)
    assert d.do(g.Arm(result, "ana")).accepted
    d.do(g.Disarm("ana"))
    out = d.do(g.Arm(result, "ana"))
    assert not out.accepted
    assert "already used" in out.refusal


def test_a_checklist_done_before_a_trip_does_not_arm_after_it():
    d = drive(g.SAFE)
    early = passed(d.now + 0.5)  # completed, not yet used
    d.do(g.Trip("detector at full scale", "near_full_scale", d.now))
    d.do(g.ConditionCleared("near_full_scale"))
    d.do(g.Acknowledge("ana"))
    out = d.do(g.Arm(early, "ana"))
    assert not out.accepted and "before the last trip" in out.refusal
    assert d.do(g.Arm(passed(d.now + 0.5), "ana")).accepted


def test_emit_needs_a_named_person():
    d = drive(g.ARMED)
    out = d.do(g.Emit(""))
    assert not out.accepted and d.guard.state == g.ARMED
    assert "deliberate" in out.refusal


def test_no_arming_after_shutdown():
    d = drive(g.EMITTING)
    assert d.do(g.Shutdown(reason="normal exit")).after == g.SAFE
    out = d.do(g.Arm(passed(d.now + 0.5), "ana"))
    assert not out.accepted and "shut down" in out.refusal


def test_refused_emission_while_tripped_names_the_trip():
    d = drive(g.TRIPPED)
    out = d.do(g.Emit("ana"))
    assert not out.accepted and "interlock open" in out.refusal


def test_bad_inputs_raise_value_error_naming_the_argument():
    guard = g.Guard()
    with pytest.raises(ValueError, match="now"):
        guard.handle(g.Start(), float("nan"))
    with pytest.raises(ValueError, match="event"):
        guard.handle("start", 1.0)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="checklist_max_age"):
        g.Guard(checklist_max_age=-1)


def test_events_are_frozen():
    with pytest.raises(AttributeError):
        g.Emit("ana").who = "bob"  # type: ignore[misc]
