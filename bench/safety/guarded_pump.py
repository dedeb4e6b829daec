"""GuardedPump: the only object that commands the pump output.

It holds the guard's state machine (`bench.safety.guard.Guard`) and a pump driver, performs the
actions the guard returns and records every transition as an `Event`. The pump output is
commanded off at `start`, on every trip, stop, disarm and acknowledgement, and at `shutdown`;
used as a context manager, ``__exit__`` commands it off on a normal exit, on Ctrl-C and on any
exception.

An off command that fails is retried (``off_attempts`` times within ``off_deadline`` s, each
attempt read back with ``output_is_on``); if it still fails, the pump shutter (when there is
one) is closed, a ``"fault"`` Event is recorded, ``logging.critical`` is called and the guard
trips with `bench.safety.guard.PUMP_OFF_FAILED`. Trip latency is recorded from the run-clock time of
the reading that showed the condition (``seen_at``) to the completion of the off command.

Thread-safe: one re-entrant lock serialises every command, so the pipeline thread and a UI
thread may both call it. A trip waits for a command in progress (at most that command's
driver timeout) before it switches the pump off.

This is a second safety layer only. It never replaces the hardware interlock, the laser safety
officer, ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

import logging
import math
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import replace
from types import MappingProxyType, TracebackType
from typing import Self

from bench.config import BenchConfig
from bench.records import PUMP_ON, Block, Event
from bench.run import stop_signals
from bench.safety.condition_record import TripCondition, reads_exactly
from bench.safety.conditions import INTERLOCK_OPEN, condition_named
from bench.safety.guard import (
    ARMED,
    EMITTING,
    OPERATOR_STOP,
    PUMP_COMMAND_FAILED,
    PUMP_OFF_FAILED,
    TRIPPED,
    Acknowledge,
    Action,
    Arm,
    ChecklistOutcome,
    CloseShutter,
    ConditionCleared,
    Disarm,
    Emit,
    Guard,
    GuardRefused,
    HeldCondition,
    OpenShutter,
    Outcome,
    PumpOff,
    PumpOn,
    Shutdown,
    Start,
    StopEmission,
    Trip,
)
from bench.safety.pump_off import close_shutter, command_off, off_failed_event
from bench.safety.pump_protocols import OffReport, Performed, PumpOutput, Shutter
from bench.safety.trip_monitor import TripMonitor

log = logging.getLogger("bench.safety.guard")

#: Run-clock s after the off command before a pump reading showing the output on makes the
#: guard command it off again (`GuardedPump.recommand_off`), and the least real time between
#: two such commands (common practice, no source).
RECOMMAND_AFTER = 0.1
RECOMMAND_EVERY = 0.1


def _who_ok(who: object) -> str:
    return who if isinstance(who, str) and who.strip() else "gainbench"


class GuardedPump:
    """The pump output, behind the guard.

    Parameters
    ----------
    pump : PumpOutput
        The pump driver.
    guard : Guard, optional
        The state machine (a new one when None).
    shutter : Shutter, optional
        Shutter controller; ``shutter_name`` is closed on trips and when an off command fails.
    clock : callable
        The run clock (s, monotonic), the same clock the blocks' times and the checklist use.
    event_sink : callable, optional
        Called with every `Event` (guard transitions, trips, faults, settings); exceptions it
        raises are logged and never stop the pump from being switched off.
    monitor : TripMonitor, optional
        Its active conditions are checked before emission, it judges whether held conditions
        have cleared on acknowledgement, and it is told when the pump changes on purpose.
        Without one, acknowledgement reads the interlock and output state from the driver and
        other conditions must be reported with `clear_condition`.
    max_current : float, optional
        A; `set_current` refuses anything above (and refuses everything when None).
    off_attempts, off_deadline, retry_pause : int, float, float
        Retries of a failed off command: at most this many attempts, stopped after the
        deadline (s), with this pause (s) between attempts.
    verify_off : bool
        Read the output state back after each off command (a command accepted while the output
        stays on counts as a failure).
    sleep : callable
        Used for ``retry_pause`` (tests pass a function that does not wait).
    """

    def __init__(
        self,
        pump: PumpOutput,
        guard: Guard | None = None,
        shutter: Shutter | None = None,
        clock: Callable[[], float] = time.monotonic,
        event_sink: Callable[[Event], None] | None = None,
        *,
        monitor: TripMonitor | None = None,
        max_current: float | None = None,
        off_attempts: int = 3,
        off_deadline: float = 0.5,
        retry_pause: float = 0.02,
        verify_off: bool = True,
        sleep: Callable[[float], None] = time.sleep,
        shutter_name: str = "pump",
    ) -> None:
        if not isinstance(pump, PumpOutput):
            raise ValueError(
                "pump: expected a pump driver with output, output_is_on, interlock_closed, "
                "mount_temperature, measured_current, current_setpoint and set_current"
            )
        if shutter is not None and not isinstance(shutter, Shutter):
            raise ValueError("shutter: expected an object with open_shutter(name) and close_shutter(name)")
        if not callable(clock):
            raise ValueError("clock: expected a callable returning seconds")
        if event_sink is not None and not callable(event_sink):
            raise ValueError("event_sink: expected a callable taking an Event")
        if isinstance(off_attempts, bool) or not isinstance(off_attempts, int) or off_attempts < 1:
            raise ValueError(f"off_attempts: expected a whole number >= 1, got {off_attempts!r}")
        for name, value in (("off_deadline", off_deadline), ("retry_pause", retry_pause)):
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise ValueError(f"{name}: expected a time >= 0 s, got {value!r}")
        if max_current is not None and not (
            isinstance(max_current, (int, float)) and math.isfinite(max_current) and max_current > 0
        ):
            raise ValueError(f"max_current: expected a positive current in A or None, got {max_current!r}")
        self._pump = pump
        self._guard = guard if guard is not None else Guard()
        self._shutter = shutter
        self._clock = clock
        self._sink = event_sink
        self._monitor = monitor
        self.max_current = None if max_current is None else float(max_current)
        self.off_attempts = off_attempts
        self.off_deadline = float(off_deadline)
        self.retry_pause = float(retry_pause)
        self.verify_off = verify_off
        self._sleep = sleep
        self.shutter_name = shutter_name
        self._lock = threading.RLock()
        self._commanded_on = False
        self._off_since: float | None = None
        self._on_since: float | None = None
        self._changed_at = -math.inf
        self._latencies: deque[float] = deque(maxlen=1000)
        self._last_recommand = 0.0

    @classmethod
    def from_config(cls, pump: PumpOutput, cfg: BenchConfig, **kwargs: object) -> GuardedPump:
        """A GuardedPump whose current limit is the lower of ``guard.max_current`` and ``pump.max_current``."""
        kwargs.setdefault("max_current", min(cfg.guard.max_current, cfg.pump.max_current))
        return cls(pump, **kwargs)  # type: ignore[arg-type]

    # -- reading ---------------------------------------------------------------------------
    @property
    def state(self) -> str:
        return self._guard.state

    @property
    def guard(self) -> Guard:
        return self._guard

    @property
    def held(self) -> dict[str, HeldCondition]:
        with self._lock:
            return dict(self._guard.held)

    @property
    def trip_reason(self) -> str | None:
        return self._guard.trip_reason

    @property
    def output_off_since(self) -> float | None:
        """Run-clock time the output was last commanded off; None while commanded on.

        Before the first off command it is ``-inf``: the tool expects the output off from the
        start. Pass it to `TripMonitor.feed_pump`.
        """
        if self._commanded_on:
            return None
        return -math.inf if self._off_since is None else self._off_since

    @property
    def output_on_since(self) -> float | None:
        """Run-clock time the output was last commanded on; None while commanded off.

        Pass it to `TripMonitor.feed_pump`: a later reading showing the output off trips.
        """
        return self._on_since if self._commanded_on else None

    @property
    def trip_latencies(self) -> list[float]:
        """Latencies (s) of recent trips: seen_at to the off command completing."""
        with self._lock:
            return list(self._latencies)

    # -- commands --------------------------------------------------------------------------
    def start(self, who: str = "gainbench") -> Outcome:
        """The tool starts: command the output off (and close the pump shutter)."""
        with self._lock:
            outcome = self._run(Start(who=_who_ok(who)))
            self._note_change()
            return outcome

    def arm(self, checklist_result: ChecklistOutcome, who: str | None = None) -> Outcome:
        """Arm with a passed checklist result; raises `GuardRefused` with the reason otherwise."""
        name = who if who is not None else getattr(checklist_result, "operator", "")
        outcome = self._run(Arm(checklist_result, name))
        if not outcome.accepted:
            raise GuardRefused(f"arming refused: {outcome.refusal}")
        return outcome

    def emit(self, who: str) -> Outcome:
        """Switch the pump on (armed only, a named person); raises `GuardRefused` otherwise.

        Just before, the monitor's active conditions and the driver's interlock are checked;
        a failure trips the guard instead.
        """
        with self._lock:
            if self._guard.state == ARMED:
                problem = self._pre_emission_problem()
                if problem is not None:
                    condition, reason, seen_at = problem
                    self._run(Trip(reason, condition, seen_at))
                    raise GuardRefused(f"emission refused and the guard tripped: {reason}")
            outcome = self._run(Emit(who))
            if not outcome.accepted:
                raise GuardRefused(f"emission refused: {outcome.refusal}")
            if self._guard.state != EMITTING:
                raise GuardRefused(
                    f"the pump could not be switched on; the guard tripped: {self._guard.trip_reason}"
                )
            self._note_change()
            return outcome

    def stop_emission(self, who: str = "gainbench") -> Outcome:
        """Output off, stay armed (never refused)."""
        with self._lock:
            outcome = self._run(StopEmission(who=_who_ok(who)))
            self._note_change()
            return outcome

    def disarm(self, who: str = "gainbench", reason: str = "") -> Outcome:
        """Output off, back to safe (never refused; a trip stays held)."""
        with self._lock:
            outcome = self._run(Disarm(who=_who_ok(who), reason=reason))
            self._note_change()
            return outcome

    def trip(
        self,
        reason: str,
        condition: str = OPERATOR_STOP,
        seen_at: float | None = None,
        who: str = "gainbench",
    ) -> Outcome:
        """Trip: output off at once, shutter closed, condition held (never refused).

        ``seen_at`` is the run-clock time of the reading that showed the condition (now when
        None); the latency to the off command completing is recorded in the trip Event.
        """
        with self._lock:
            t = self._clock() if seen_at is None else seen_at
            outcome = self._run(Trip(reason, condition, t, who=_who_ok(who)))
            self._note_change()
            return outcome

    def trip_on(self, conditions: Iterable[TripCondition]) -> list[Outcome]:
        """Trip on each condition a `TripMonitor` reported."""
        return [self.trip(c.reason, c.condition, c.seen_at) for c in conditions]

    def clear_condition(self, condition: str, who: str = "gainbench", detail: str = "") -> Outcome:
        """Report that a held condition no longer holds; raises `GuardRefused` if it is not held."""
        outcome = self._run(ConditionCleared(condition, who=_who_ok(who), detail=detail))
        if not outcome.accepted:
            raise GuardRefused(outcome.refusal or "refused")
        return outcome

    def acknowledge(self, who: str) -> Outcome:
        """Acknowledge a trip: back to safe once every held condition has cleared.

        Held conditions are first judged on fresh readings (the monitor, or the driver); the
        acknowledgement is refused, with the reason, while any still holds.
        """
        with self._lock:
            notes: list[str] = []
            if self._guard.state == TRIPPED:
                now = self._clock()
                for condition, held in self._guard.held.items():
                    why = self._why_still_holds(condition, held.seen_at, now)
                    if why is None:
                        self._run(
                            ConditionCleared(condition, detail="fresh readings show it no longer holds")
                        )
                    elif why != held.reason:
                        notes.append(f"{condition}: {why}")
            outcome = self._run(Acknowledge(who))
            if not outcome.accepted:
                now_text = f" (now: {'; '.join(notes)})" if notes else ""
                raise GuardRefused(f"acknowledgement refused: {outcome.refusal}{now_text}")
            return outcome

    def set_current(self, current: float, who: str = "gainbench") -> None:
        """Set the pump current (A), at most ``max_current``; refused above it.

        A failure while emitting trips the guard (the current is then unknown).
        """
        if (
            isinstance(current, bool)
            or not isinstance(current, (int, float))
            or not (math.isfinite(current) and current >= 0)
        ):
            raise ValueError(f"current: expected a current >= 0 A, got {current!r}")
        if self.max_current is None:
            raise GuardRefused("no current limit is configured for the pump: setting the current is refused")
        if current > self.max_current:
            raise GuardRefused(
                f"pump current {current:g} A is above the limit {self.max_current:g} A of the bench file"
            )
        with stop_signals.shielded(), self._lock:
            try:
                self._pump.set_current(float(current))
            except Exception as exc:  # any driver failure
                detail = f"{type(exc).__name__}: {exc}"
                self._record(
                    Event(
                        self._clock(),
                        "fault",
                        f"setting the pump current to {current:g} A failed: {detail}",
                        data=MappingProxyType({"current_a": float(current), "error": detail}),
                    )
                )
                if self._guard.state == EMITTING:
                    self._run(
                        Trip(
                            f"setting the pump current failed while emitting ({detail})",
                            PUMP_COMMAND_FAILED,
                            self._clock(),
                        )
                    )
                raise GuardRefused(f"setting the pump current failed: {detail}") from exc
            now = self._clock()
            self._record(
                Event(
                    now,
                    "setting",
                    f"pump current set to {current:g} A by {_who_ok(who)}",
                    who=_who_ok(who),
                    data=MappingProxyType({"pump_current_setpoint_a": float(current)}),
                )
            )
            self._note_change(now)

    def recommand_off(self, block: Block) -> None:
        """A pump reading shows the output on while the guard has not let it emit: command it off again.

        Readings taken within `RECOMMAND_AFTER` s of the off command are not counted (the output
        may not have gone off yet); a failed off command is thus retried on every such reading,
        at most every `RECOMMAND_EVERY` s of real time, until the output reads off. Called from
        the thread that reads the pump, with each pump block.
        """
        if self._guard.state == EMITTING or PUMP_ON not in block.channels:
            return
        off_since = self.output_off_since
        taken_after_off = off_since is not None and block.t0 > off_since + RECOMMAND_AFTER
        if (
            block.column(PUMP_ON)[-1] > 0.5
            and taken_after_off
            and time.monotonic() - self._last_recommand > RECOMMAND_EVERY
        ):
            self._last_recommand = time.monotonic()
            self.stop_emission(who="gainbench (output read on while not emitting)")

    def shutdown(self, who: str = "gainbench", reason: str = "exit") -> Outcome:
        """Output off and shutter closed; arming is refused afterwards."""
        with self._lock:
            outcome = self._run(Shutdown(who=_who_ok(who), reason=reason))
            self._note_change()  # the probe's transmission changes with the pump: expected
            return outcome

    def __enter__(self) -> Self:
        self.start()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> bool:
        if exc_type is None:
            reason = "normal exit"
        elif issubclass(exc_type, KeyboardInterrupt):
            reason = "interrupted (Ctrl-C)"
        else:
            reason = f"exception {exc_type.__name__}: {exc}"
        try:
            self.shutdown(reason=reason)
        except Exception:  # never mask the original exception; the failure is logged loudly
            log.critical(
                "gainbench guard: shutdown on exit failed; switch the pump off at the driver", exc_info=True
            )
        return False

    # -- the machinery ---------------------------------------------------------------------
    def _run(self, event: object) -> Outcome:
        # A Ctrl-C must not cut a pump exchange in half (the reply left unread would be taken
        # for the answer to the next command): in the main thread it waits for the command.
        with stop_signals.shielded(), self._lock:
            now = self._clock()
            outcome = self._guard.handle(event, now)  # type: ignore[arg-type]
            if any(isinstance(a, (PumpOff, PumpOn)) for a in outcome.actions):
                # before the command: readings that show its effect may arrive while it runs
                self._note_change(now)
            done = self._perform(outcome.actions)
            record = outcome.event
            extra: dict[str, object] = {}
            if done.off is not None:
                extra["pump_off_ok"] = done.off.ok
                extra["off_attempts"] = done.off.attempts
            if isinstance(event, Trip) and outcome.accepted:
                seen_at = float(record.data.get("seen_at", now))
                if done.off is not None and done.off.ok and done.off.done_at is not None:
                    latency = done.off.done_at - seen_at
                    extra["latency_s"] = latency
                    self._latencies.append(latency)
                else:
                    extra["latency_s"] = None
            if extra:
                record = replace(record, data=MappingProxyType({**record.data, **extra}))
                outcome = replace(outcome, event=record)
            self._record(record)
            for fault in done.faults:
                self._record(fault)
            if done.failed is not None:
                condition, reason, t = done.failed
                already = isinstance(event, Trip) and event.condition == condition
                if not already:
                    self._run(Trip(reason, condition, t))
            return outcome

    def _perform(self, actions: tuple[Action, ...]) -> Performed:
        done = Performed()
        shutter_closed = False
        for action in actions:
            if isinstance(action, PumpOff):
                report = self._command_off()
                done.off = report
                if not report.ok:
                    closed = self._close_shutter(done, why="the pump off command failed")
                    shutter_closed = shutter_closed or closed
                    done.faults.insert(0, self._off_fault(report, closed))
                    reason = f"the pump output off command failed after {report.attempts} attempts ({report.error})"
                    done.failed = (PUMP_OFF_FAILED, reason, self._clock())
            elif isinstance(action, CloseShutter):
                if not shutter_closed:
                    shutter_closed = self._close_shutter(done, why="guard", name=action.name)
            elif isinstance(action, OpenShutter):
                if self._shutter is None:
                    continue
                try:
                    self._shutter.open_shutter(action.name)
                except Exception as exc:  # any controller failure: do not switch on
                    detail = f"{type(exc).__name__}: {exc}"
                    done.faults.append(
                        Event(
                            self._clock(),
                            "fault",
                            f"opening the {action.name} shutter failed: {detail}",
                            data=MappingProxyType({"shutter": action.name, "error": detail}),
                        )
                    )
                    done.failed = (
                        PUMP_COMMAND_FAILED,
                        f"the {action.name} shutter did not open ({detail})",
                        self._clock(),
                    )
                    break
            elif isinstance(action, PumpOn):
                self._on_since = self._clock()
                self._commanded_on = True
                self._off_since = None
                try:
                    self._pump.output(True)
                except Exception as exc:  # any driver failure: the state of the output is unknown
                    detail = f"{type(exc).__name__}: {exc}"
                    done.faults.append(
                        Event(
                            self._clock(),
                            "fault",
                            f"the pump output on command failed: {detail}",
                            data=MappingProxyType({"error": detail}),
                        )
                    )
                    done.failed = (
                        PUMP_COMMAND_FAILED,
                        f"the pump output on command failed ({detail})",
                        self._clock(),
                    )
                    break
        return done

    def _command_off(self) -> OffReport:
        start = self._clock()
        self._commanded_on = False
        if self._off_since is None:
            self._off_since = start
        report = command_off(
            self._pump,
            self._clock,
            self._sleep,
            verify=self.verify_off,
            attempts=self.off_attempts,
            deadline=self.off_deadline,
            pause=self.retry_pause,
        )
        if report.ok:
            self._off_since = report.done_at
        return report

    def _close_shutter(self, done: Performed, why: str, name: str | None = None) -> bool:
        return close_shutter(self._shutter, name or self.shutter_name, why, self._clock, done.faults)

    def _off_fault(self, report: OffReport, shutter_closed: bool) -> Event:
        return off_failed_event(
            report, shutter_closed, self.shutter_name, self._shutter is not None, self._clock()
        )

    def _record(self, event: Event) -> None:
        if event.kind == "fault":
            log.critical("gainbench guard: %s", event.text)
        elif event.kind == "trip" or event.data.get("accepted") is False:
            log.warning("gainbench guard: %s", event.text)
        else:
            log.info("gainbench guard: %s", event.text)
        if self._sink is None:
            return
        try:
            self._sink(event)
        except Exception:  # a failing sink must never keep the pump on; the event is logged above
            log.critical(
                "gainbench guard: the event sink failed; event not stored: %s", event.text, exc_info=True
            )

    def _pre_emission_problem(self) -> tuple[str, str, float] | None:
        if self._monitor is not None:
            active = self._monitor.active_conditions()
            if active:
                first = min(active.values(), key=lambda c: c.seen_at)
                return first.condition, first.reason, first.seen_at
        now = self._clock()
        try:
            closed = self._pump.interlock_closed()
        except Exception as exc:  # cannot read the interlock: do not switch on
            return (
                PUMP_COMMAND_FAILED,
                f"could not read the hardware interlock before switching on ({type(exc).__name__}: {exc})",
                now,
            )
        if not reads_exactly(closed, True):
            return INTERLOCK_OPEN, "the hardware interlock reads open just before switching on", now
        return None

    def _why_still_holds(self, condition: str, since: float, now: float) -> str | None:
        if self._monitor is not None:
            return self._monitor.why_still_holds(condition, now, since)
        found = condition_named(condition)
        record = found[0] if found is not None else None
        if record is None or record.holds_on_driver is None:
            return f"no trip monitor is attached to judge {condition!r}; report it cleared with clear_condition()"
        try:
            return record.holds_on_driver(self._pump)
        except Exception as exc:  # cannot read: the condition is not known to have cleared
            return f"could not read the pump driver ({type(exc).__name__}: {exc})"

    @property
    def changed_at(self) -> float:
        """Run-clock time of the last change this guard made to the pump (current, output);
        -inf before any. A reading taken before it may describe the pump as it was."""
        return self._changed_at

    def _note_change(self, t: float | None = None) -> None:
        self._changed_at = self._clock() if t is None else t
        if self._monitor is not None:
            self._monitor.note_pump_change(self._clock() if t is None else t)
