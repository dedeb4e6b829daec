"""The pump-off procedure the guarded pump runs on every trip, stop and shutdown: the off
command with its read-back and retries, the pump shutter as the fallback, and the fault event
that tells a person to switch the pump off at the driver when both fail.

Each attempt sends the off command and, with ``verify``, reads the output back; it is retried
``attempts`` times within ``deadline`` s. This is a second safety layer only: it never replaces
the hardware interlock, the laser safety officer, ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

from collections.abc import Callable
from types import MappingProxyType

from bench.records import Event
from bench.safety.condition_record import reads_exactly
from bench.safety.pump_protocols import OffReport, PumpOutput, Shutter


def command_off(
    pump: PumpOutput,
    clock: Callable[[], float],
    sleep: Callable[[float], None],
    *,
    verify: bool,
    attempts: int,
    deadline: float,
    pause: float,
) -> OffReport:
    """Command the pump output off until it reads off (with ``verify``), at most ``attempts``
    times within ``deadline`` run-clock s, ``pause`` s apart; how it went."""
    start = clock()
    errors: list[str] = []
    tried = 0
    while True:
        tried += 1
        ok = False
        try:
            pump.output(False)
            done_at = clock()
            if not verify:
                ok = True
            else:
                try:
                    still_on = pump.output_is_on()
                except Exception as exc:  # a failed read-back counts as a failed attempt
                    errors.append(f"read-back failed: {type(exc).__name__}: {exc}")
                else:
                    if reads_exactly(still_on, False):
                        ok = True
                    else:
                        errors.append("the output still reads on after the off command")
        except Exception as exc:  # any driver failure: retry, then the shutter
            errors.append(f"{type(exc).__name__}: {exc}")
        if ok:
            return OffReport(True, tried, done_at)
        if tried >= attempts or clock() - start >= deadline:
            return OffReport(False, tried, None, "; ".join(errors))
        sleep(pause)


def close_shutter(
    shutter: Shutter | None, name: str, why: str, clock: Callable[[], float], faults: list[Event]
) -> bool:
    """Close shutter ``name``; True if it closed. A failure is appended to ``faults`` (loudly
    worded) and never stops the off path."""
    if shutter is None:
        return False
    try:
        shutter.close_shutter(name)
    except Exception as exc:  # any controller failure: logged loudly, never stops the off path
        detail = f"{type(exc).__name__}: {exc}"
        faults.append(
            Event(
                clock(),
                "fault",
                f"CLOSING THE {name.upper()} SHUTTER FAILED ({why}): {detail}",
                data=MappingProxyType({"shutter": name, "error": detail}),
            )
        )
        return False
    return True


def off_failed_event(
    report: OffReport, shutter_closed: bool, shutter_name: str, has_shutter: bool, t: float
) -> Event:
    """The fault event of an off command that failed: what was tried, and what a person must do."""
    if shutter_closed:
        after = f"the {shutter_name} shutter was closed"
    elif not has_shutter:
        after = "no pump shutter is configured"
    else:
        after = f"the {shutter_name} shutter could not be closed either"
    text = (
        f"PUMP OUTPUT OFF COMMAND FAILED after {report.attempts} attempts ({report.error}); {after}. "
        "SWITCH THE PUMP OFF AT THE DRIVER (key switch or emergency stop) AND CHECK THE HARDWARE INTERLOCK."
    )
    return Event(
        t,
        "fault",
        text,
        data=MappingProxyType(
            {
                "error": report.error,
                "attempts": report.attempts,
                "shutter_closed": shutter_closed,
            }
        ),
    )
