"""The guard's states and transitions. Everything that affects the guard's state lives here.

The guard is gainbench's software safety layer between every code path and the pump driver.
It is a *second* layer only: it never replaces the hardware interlock, the laser safety
officer's procedures, ANSI Z136.1 / IEC 60825-1 or local rules.

This module is sans-I/O. `Guard.handle` takes one small frozen event (`Arm`, `Emit`, `Trip`,
...) and the time, changes the state through a table keyed by state, and returns an `Outcome`:
whether the request was accepted, the actions the caller must perform (`PumpOff`, `PumpOn`,
`CloseShutter`, `OpenShutter`) and the `bench.records.Event` that records it. It never talks to
an instrument; `bench.safety.guarded_pump.GuardedPump` performs the actions.

States
------
``safe``
    Pump output off, nothing armed.
``armed``
    The arming checklist passed; the output is still off.
``emitting``
    The output is on. Reached only from ``armed``, by a deliberate `Emit` naming a person.
``tripped``
    The output was forced off; the conditions that tripped it are held. It leaves only by an
    `Acknowledge`, only once every held condition has been reported cleared
    (`ConditionCleared`), and it returns to ``safe``, never to ``armed`` or ``emitting``.

Rules the table keeps
---------------------
- Requests that switch the pump off (`Start`, `Disarm`, `StopEmission`, `Trip`, `Shutdown`)
  are never refused; where they do not change the state they still command the output off.
- No event commands emission except `Emit` in ``armed``.
- Arming needs a checklist result that passed, has not been used to arm before, was completed
  after the last trip, disarm, acknowledgement, start or shutdown, is not older than
  ``checklist_max_age`` and is not dated after ``now`` (a sign of two different clocks).
- Every event handled, accepted or refused, yields exactly one `Event` (kind ``"trip"`` for a
  trip, ``"guard"`` otherwise) with the time, the states before and after, the reason and who.

The reset rule (a trip is cleared by a deliberate reset, and the reset itself never restarts
emission) follows the manual-reset requirement of machinery safety standards.

References
----------
.. [1] IEC 60204-1:2016, Safety of machinery - Electrical equipment of machines, 9.2.3.4 and
   9.2.3.5: resetting a stop or an emergency stop shall not by itself restart the machine
   (clause numbers from memory).
.. [2] ISO 13849-1:2015, Safety of machinery - Safety-related parts of control systems,
   5.2.2 "Manual reset" (clause number from memory).
.. [3] ANSI Z136.1-2014, American National Standard for Safe Use of Lasers, section 4
   (control measures: interlocks and a deliberate action to resume emission for class 3B and
   class 4 lasers; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType
from typing import Protocol, runtime_checkable

from bench.errors import GainbenchError
from bench.records import Event

# --------------------------------------------------------------------------------------------
# States

SAFE = "safe"
ARMED = "armed"
EMITTING = "emitting"
TRIPPED = "tripped"
STATES = (SAFE, ARMED, EMITTING, TRIPPED)

#: Conditions that belong to the guard itself (the checks' own are in bench.safety.conditions).
OPERATOR_STOP = "operator_stop"  # a person tripped the guard (stop button, Ctrl-C, ...)
PUMP_OFF_FAILED = "pump_off_failed"  # the off command failed after its retries
PUMP_COMMAND_FAILED = "pump_command_failed"  # an on, current or shutter command failed

#: Default longest age of a checklist result used to arm, s (common practice, no source:
#: the answers describe the bench as it was when they were given).
DEFAULT_CHECKLIST_MAX_AGE = 900.0


class GuardRefused(GainbenchError):
    """The guard refused a request; the message says why and what to do."""


@runtime_checkable
class ChecklistOutcome(Protocol):
    """What the guard needs from an arming checklist result (`bench.safety.checklist.ChecklistResult`)."""

    @property
    def passed(self) -> bool: ...

    @property
    def refusals(self) -> Sequence[str]: ...

    @property
    def operator(self) -> str: ...

    @property
    def completed_at(self) -> float: ...

    @property
    def token(self) -> str: ...


# --------------------------------------------------------------------------------------------
# Actions the caller performs


@dataclass(frozen=True)
class PumpOff:
    """Command the pump output off (retried, then the shutter, if it fails)."""


@dataclass(frozen=True)
class PumpOn:
    """Command the pump output on."""


@dataclass(frozen=True)
class CloseShutter:
    """Close the named shutter (``"pump"``: the shutter in the pump beam), if there is one."""

    name: str = "pump"


@dataclass(frozen=True)
class OpenShutter:
    """Open the named shutter, if there is one."""

    name: str = "pump"


Action = PumpOff | PumpOn | CloseShutter | OpenShutter

# --------------------------------------------------------------------------------------------
# Events handled


@dataclass(frozen=True)
class Start:
    """The tool starts: the output is commanded off whatever state the pump was left in."""

    who: str = "gainbench"


@dataclass(frozen=True)
class Arm:
    """Arm after the checklist passed."""

    checklist: ChecklistOutcome
    who: str


@dataclass(frozen=True)
class Disarm:
    """Back to ``safe`` (output off)."""

    who: str = "gainbench"
    reason: str = ""


@dataclass(frozen=True)
class Emit:
    """Switch the pump output on: a deliberate act of a named person."""

    who: str


@dataclass(frozen=True)
class StopEmission:
    """Switch the output off and stay armed."""

    who: str = "gainbench"


@dataclass(frozen=True)
class Trip:
    """A condition failed: force the output off and hold the condition.

    ``seen_at`` is the run-clock time of the reading that showed it.
    """

    reason: str
    condition: str
    seen_at: float
    who: str = "gainbench"


@dataclass(frozen=True)
class ConditionCleared:
    """A held condition no longer holds (judged on readings taken after the trip)."""

    condition: str
    who: str = "gainbench"
    detail: str = ""


@dataclass(frozen=True)
class Acknowledge:
    """A person acknowledges the trip (refused while any held condition still holds)."""

    who: str


@dataclass(frozen=True)
class Shutdown:
    """The tool stops (normal exit, Ctrl-C, exception): output off; arming is refused after."""

    who: str = "gainbench"
    reason: str = "exit"


GuardEvent = Start | Arm | Disarm | Emit | StopEmission | Trip | ConditionCleared | Acknowledge | Shutdown
EVENT_TYPES: tuple[type, ...] = (
    Start,
    Arm,
    Disarm,
    Emit,
    StopEmission,
    Trip,
    ConditionCleared,
    Acknowledge,
    Shutdown,
)

# --------------------------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class HeldCondition:
    """A condition that tripped the guard and has not been reported cleared."""

    condition: str
    reason: str
    seen_at: float


@dataclass(frozen=True)
class Outcome:
    """What handling one event did.

    Attributes
    ----------
    accepted : bool
        False when the request was refused (``refusal`` says why; ``actions`` is empty).
    before, after : str
        States before and after.
    actions : tuple
        Actions to perform, in order.
    event : Event
        The record of it (kind ``"trip"`` or ``"guard"``).
    refusal : str or None
        Why it was refused.
    """

    accepted: bool
    before: str
    after: str
    actions: tuple[Action, ...]
    event: Event
    refusal: str | None = None


# --------------------------------------------------------------------------------------------
# The machine

_OFF = (PumpOff(),)
_OFF_AND_SHUTTER = (PumpOff(), CloseShutter("pump"))
_ON = (OpenShutter("pump"), PumpOn())


class Guard:
    """The guard's state machine (not thread-safe by itself: `GuardedPump` holds a lock).

    Parameters
    ----------
    checklist_max_age : float or None
        Longest age (s) of a checklist result used to arm; None for no limit.
    """

    def __init__(self, *, checklist_max_age: float | None = DEFAULT_CHECKLIST_MAX_AGE) -> None:
        if checklist_max_age is not None and not (
            isinstance(checklist_max_age, (int, float))
            and checklist_max_age > 0
            and math.isfinite(checklist_max_age)
        ):
            raise ValueError(
                f"checklist_max_age: expected a positive number of seconds or None, got {checklist_max_age!r}"
            )
        self.checklist_max_age = checklist_max_age
        self._state = SAFE
        self._held: dict[str, HeldCondition] = {}
        self._trip: HeldCondition | None = None  # the condition that tripped it first
        self._reset_at = -math.inf  # last trip, disarm, acknowledgement, start or shutdown
        self._used_tokens: set[str] = set()
        self._shut_down = False

    # -- reading ---------------------------------------------------------------------------
    @property
    def state(self) -> str:
        return self._state

    @property
    def held(self) -> Mapping[str, HeldCondition]:
        """Held conditions (only while tripped), by condition name."""
        return MappingProxyType(dict(self._held))

    @property
    def trip_reason(self) -> str | None:
        """The reason of the trip being held, or None when not tripped."""
        return self._trip.reason if self._trip is not None else None

    # -- handling --------------------------------------------------------------------------
    def handle(self, event: GuardEvent, now: float) -> Outcome:
        """Handle one event at run-clock time ``now`` (s); see the module notes."""
        if isinstance(now, bool) or not isinstance(now, (int, float)) or not math.isfinite(now):
            raise ValueError(f"now: expected a finite time in seconds, got {now!r}")
        handler = TRANSITIONS[self._state].get(type(event))
        if handler is None:
            raise ValueError(
                f"event: {event!r} is not a guard event (one of {', '.join(t.__name__ for t in EVENT_TYPES)})"
            )
        return handler(self, event, float(now))

    # -- helpers for the handlers ----------------------------------------------------------
    def _go(
        self,
        event: GuardEvent,
        now: float,
        to: str,
        actions: tuple[Action, ...],
        reason: str,
        kind: str = "guard",
        **extra: object,
    ) -> Outcome:
        before = self._state
        self._state = to
        data = {
            "from": before,
            "to": to,
            "reason": reason,
            "event": type(event).__name__,
            "accepted": True,
            "actions": [type(a).__name__ for a in actions],
            **extra,
        }
        record = Event(
            t=now, kind=kind, text=f"{before} -> {to}: {reason}", who=_who(event), data=MappingProxyType(data)
        )
        return Outcome(True, before, to, actions, record)

    def _refuse(self, event: GuardEvent, now: float, reason: str, **extra: object) -> Outcome:
        data = {
            "from": self._state,
            "to": self._state,
            "reason": reason,
            "event": type(event).__name__,
            "accepted": False,
            "actions": [],
            **extra,
        }
        text = f"refused {type(event).__name__} in {self._state}: {reason}"
        record = Event(t=now, kind="guard", text=text, who=_who(event), data=MappingProxyType(data))
        return Outcome(False, self._state, self._state, (), record, refusal=reason)

    # -- transitions -----------------------------------------------------------------------
    def _start(self, event: Start, now: float) -> Outcome:
        self._reset_at = now
        to = TRIPPED if self._state == TRIPPED else SAFE
        return self._go(event, now, to, _OFF_AND_SHUTTER, "tool started: pump output commanded off")

    def _arm(self, event: Arm, now: float) -> Outcome:
        why = self._arming_refusal(event, now)
        if why is not None:
            return self._refuse(event, now, why)
        result = event.checklist
        self._used_tokens.add(result.token)
        return self._go(
            event,
            now,
            ARMED,
            (),
            f"armed by {event.who} after the checklist passed",
            checklist_token=result.token,
            checklist_operator=result.operator,
            checklist_completed_at=float(result.completed_at),
        )

    def _arming_refusal(self, event: Arm, now: float) -> str | None:
        if self._shut_down:
            return "the guard has shut down; start the tool again to arm"
        if not _named(event.who):
            return "arming is a deliberate act: name the person arming (who)"
        result = event.checklist
        if not isinstance(result, ChecklistOutcome):
            return "no arming checklist result was given"
        if result.passed is not True:
            details = "; ".join(result.refusals) or "no reason given"
            return f"the arming checklist did not pass: {details}"
        if not result.token or result.token in self._used_tokens:
            return "this checklist result was already used to arm; run the arming checklist again"
        done = float(result.completed_at)
        if not math.isfinite(done):
            return "the checklist result has no valid completion time; run the arming checklist again"
        if done > now:
            return (
                f"the checklist is dated t={done:.3f} s, after now (t={now:.3f} s): the checklist and "
                "the guard use different clocks; run the checklist with the run clock"
            )
        if done < self._reset_at:
            return (
                f"the checklist was completed (t={done:.3f} s) before the last trip, disarm, "
                f"acknowledgement or start (t={self._reset_at:.3f} s); run the arming checklist again"
            )
        if self.checklist_max_age is not None and now - done > self.checklist_max_age:
            return (
                f"the checklist is {now - done:.0f} s old (at most {self.checklist_max_age:.0f} s); "
                "run the arming checklist again"
            )
        return None

    def _disarm(self, event: Disarm, now: float) -> Outcome:
        self._reset_at = now
        why = f"disarmed by {event.who}" + (f" ({event.reason})" if event.reason else "")
        if self._state == TRIPPED:
            return self._go(
                event, now, TRIPPED, _OFF, f"{why}; output off; the trip still needs acknowledging"
            )
        if self._state == SAFE:
            return self._go(event, now, SAFE, _OFF, f"{why} while not armed: output commanded off again")
        return self._go(event, now, SAFE, _OFF_AND_SHUTTER, why)

    def _emit(self, event: Emit, now: float) -> Outcome:
        if not _named(event.who):
            return self._refuse(
                event, now, "switching the pump on is a deliberate act: name the person (who)"
            )
        return self._go(event, now, EMITTING, _ON, f"emission started by {event.who}")

    def _stop(self, event: StopEmission, now: float) -> Outcome:
        if self._state == EMITTING:
            return self._go(event, now, ARMED, _OFF, f"emission stopped by {event.who}; still armed")
        return self._go(
            event,
            now,
            self._state,
            _OFF,
            f"stop requested by {event.who} while not emitting: output commanded off again",
        )

    def _trip_event(self, event: Trip, now: float) -> Outcome:
        reason = event.reason.strip() if isinstance(event.reason, str) else ""
        condition = event.condition.strip() if isinstance(event.condition, str) else ""
        seen_at = event.seen_at
        if not reason:
            reason = "a trip with no reason given"
        if not condition:
            condition = OPERATOR_STOP
        if isinstance(seen_at, bool) or not isinstance(seen_at, (int, float)) or not math.isfinite(seen_at):
            seen_at = now
        held = HeldCondition(condition, reason, float(seen_at))
        self._held[condition] = held
        if self._trip is None:
            self._trip = held
        self._reset_at = now
        again = " (already tripped; condition added)" if self._state == TRIPPED else ""
        return self._go(
            event,
            now,
            TRIPPED,
            _OFF_AND_SHUTTER,
            f"trip: {reason}{again}",
            kind="trip",
            condition=condition,
            seen_at=float(seen_at),
            held=sorted(self._held),
        )

    def _cleared(self, event: ConditionCleared, now: float) -> Outcome:
        if event.condition not in self._held:
            held = ", ".join(sorted(self._held)) or "none"
            return self._refuse(event, now, f"condition {event.condition!r} is not held (held: {held})")
        del self._held[event.condition]
        detail = f": {event.detail}" if event.detail else ""
        left = ", ".join(sorted(self._held)) or "none"
        return self._go(
            event,
            now,
            TRIPPED,
            (),
            f"condition {event.condition} cleared{detail} (still held: {left})",
            condition=event.condition,
        )

    def _acknowledge(self, event: Acknowledge, now: float) -> Outcome:
        if not _named(event.who):
            return self._refuse(event, now, "acknowledging a trip is a deliberate act: name the person (who)")
        if self._held:
            still = "; ".join(f"{h.condition}: {h.reason}" for h in self._held.values())
            return self._refuse(
                event,
                now,
                f"cannot acknowledge while the condition still holds ({still})",
                held=sorted(self._held),
            )
        tripped_by = self._trip.reason if self._trip is not None else ""
        self._trip = None
        self._reset_at = now
        return self._go(
            event,
            now,
            SAFE,
            _OFF,
            f"trip acknowledged by {event.who} ({tripped_by}); back to safe, arm again to emit",
        )

    def _shutdown(self, event: Shutdown, now: float) -> Outcome:
        self._shut_down = True
        self._reset_at = now
        to = TRIPPED if self._state == TRIPPED else SAFE
        return self._go(
            event, now, to, _OFF_AND_SHUTTER, f"shutdown ({event.reason}): pump output commanded off"
        )


def _who(event: GuardEvent) -> str:
    who = getattr(event, "who", "")
    return who if _named(who) else "unnamed"


def _named(who: object) -> bool:
    return isinstance(who, str) and bool(who.strip())


def _refusal(reason: str) -> Callable[[Guard, GuardEvent, float], Outcome]:
    def refuse(guard: Guard, event: GuardEvent, now: float) -> Outcome:
        text = reason.format(trip=guard.trip_reason or "")
        return guard._refuse(event, now, text)

    refuse.refusal = reason  # type: ignore[attr-defined]
    return refuse


_NOT_TRIPPED = "nothing to acknowledge: the guard is not tripped"
_NOTHING_HELD = "no condition is held: the guard is not tripped"
_TRIPPED_ARM = (
    "tripped ({trip}): acknowledge the trip once its condition has cleared, then run the "
    "arming checklist again"
)
_TRIPPED_EMIT = (
    "tripped ({trip}): emission is refused until the trip is acknowledged and the guard is armed again"
)

#: The transition table: state -> event type -> handler. Every (state, event) pair is listed,
#: either as a transition (a method of Guard) or as a refusal with its reason.
TRANSITIONS: Mapping[str, Mapping[type, Callable[[Guard, GuardEvent, float], Outcome]]] = MappingProxyType(
    {
        SAFE: MappingProxyType(
            {
                Start: Guard._start,
                Arm: Guard._arm,
                Disarm: Guard._disarm,
                Emit: _refusal("not armed: run the arming checklist and arm before switching the pump on"),
                StopEmission: Guard._stop,
                Trip: Guard._trip_event,
                ConditionCleared: _refusal(_NOTHING_HELD),
                Acknowledge: _refusal(_NOT_TRIPPED),
                Shutdown: Guard._shutdown,
            }
        ),
        ARMED: MappingProxyType(
            {
                Start: Guard._start,
                Arm: _refusal("already armed"),
                Disarm: Guard._disarm,
                Emit: Guard._emit,
                StopEmission: Guard._stop,
                Trip: Guard._trip_event,
                ConditionCleared: _refusal(_NOTHING_HELD),
                Acknowledge: _refusal(_NOT_TRIPPED),
                Shutdown: Guard._shutdown,
            }
        ),
        EMITTING: MappingProxyType(
            {
                Start: Guard._start,
                Arm: _refusal("already armed and emitting"),
                Disarm: Guard._disarm,
                Emit: _refusal("already emitting"),
                StopEmission: Guard._stop,
                Trip: Guard._trip_event,
                ConditionCleared: _refusal(_NOTHING_HELD),
                Acknowledge: _refusal(_NOT_TRIPPED),
                Shutdown: Guard._shutdown,
            }
        ),
        TRIPPED: MappingProxyType(
            {
                Start: Guard._start,
                Arm: _refusal(_TRIPPED_ARM),
                Disarm: Guard._disarm,
                Emit: _refusal(_TRIPPED_EMIT),
                StopEmission: Guard._stop,
                Trip: Guard._trip_event,
                ConditionCleared: Guard._cleared,
                Acknowledge: Guard._acknowledge,
                Shutdown: Guard._shutdown,
            }
        ),
    }
)
