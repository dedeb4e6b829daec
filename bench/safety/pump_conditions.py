"""Trip conditions on the pump driver's readings: interlock, mount temperature, current, output.

One section per condition: its pure check (vectorised over a block's columns), its clear rule,
its `Condition` record. The records are listed in the one table, `bench.safety.conditions.
CONDITIONS`. A second safety layer only: never a replacement for the hardware interlock.
"""

from __future__ import annotations

import math

import numpy as np

from bench.records import INTERLOCK, MOUNT_TEMP, PUMP_CURRENT, PUMP_ON, PUMP_SETPOINT
from bench.safety.condition_record import (
    PUMP,
    PUMP_FEED,
    UNJUDGED,
    BlockReading,
    Condition,
    Evidence,
    TripCondition,
    Verdict,
    cleared_by_acknowledgement,
    reads_exactly,
)
from bench.safety.condition_record import as_samples as _array
from bench.safety.condition_record import celsius as _celsius
from bench.safety.condition_record import first as _first
from bench.safety.condition_record import sample_times as _times

INTERLOCK_OPEN = "interlock_open"
MOUNT_TEMPERATURE = "mount_temperature"
OVER_CURRENT = "over_current"
CURRENT_NOT_FOLLOWING = "current_not_following"
OUTPUT_UNEXPECTED = "output_on_unexpected"
OUTPUT_OFF_UNEXPECTED = "output_off_unexpected"


def output_reads_off(e: Evidence) -> str | None:
    """Clear rule: a fresh reading shows the pump output off."""
    v, why = e.value(PUMP_ON)
    return why or (None if v < 0.5 else "the pump output still reads on")


def driver_output_reads_off(pump) -> str | None:
    """Clear rule without a monitor: the pump driver reads its output off."""
    return None if reads_exactly(pump.output_is_on(), False) else "the pump output still reads on"


# --------------------------------------------------------------------------------------------
# The hardware interlock reads open (``interlock`` channel, 1 = closed)


def check_interlock(times: object, interlock: object) -> TripCondition | None:
    """The hardware interlock reads open (below 0.5, or not a number) in any sample."""
    x = _array(interlock, "interlock")
    t = _times(times, x.shape[0])
    i = _first(~(x >= 0.5))
    if i is None:
        return None
    state = "open" if x[i] < 0.5 else f"not a valid state ({x[i]!r})"
    return TripCondition(
        INTERLOCK_OPEN, f"hardware interlock reads {state} at t={t[i]:.3f} s", float(t[i]), PUMP
    )


def _interlock_holds(e: Evidence) -> str | None:
    v, why = e.value(INTERLOCK)
    return why or (None if v >= 0.5 else "the hardware interlock still reads open")


INTERLOCK_RECORD = Condition(
    INTERLOCK_OPEN,
    PUMP_FEED,
    (INTERLOCK,),
    check=lambda r: check_interlock(r.t, r.column(INTERLOCK)) if r.has(INTERLOCK) else UNJUDGED,
    still_holds=_interlock_holds,
    summary="trips when the hardware interlock reads open; clears on a fresh reading that shows it closed",
    holds_on_driver=lambda pump: (
        None if reads_exactly(pump.interlock_closed(), True) else "the hardware interlock still reads open"
    ),
)

# --------------------------------------------------------------------------------------------
# The mount temperature is outside its window (``mount_temp``, K)


def check_mount_temperature(
    times: object, temperature: object, low: float, high: float
) -> TripCondition | None:
    """The mount temperature (K) is outside ``[low, high]`` (or not a number) in any sample."""
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        raise ValueError(f"low, high: expected a finite window low < high, got {low!r}, {high!r}")
    x = _array(temperature, "temperature")
    t = _times(times, x.shape[0])
    i = _first(~((x >= low) & (x <= high)))
    if i is None:
        return None
    v = float(x[i])
    where = (
        "not a number" if not math.isfinite(v) else _celsius(v) + (" is above" if v > high else " is below")
    )
    return TripCondition(
        MOUNT_TEMPERATURE,
        f"mount temperature {where} its window {_celsius(low)} to {_celsius(high)} at t={t[i]:.3f} s",
        float(t[i]),
        PUMP,
    )


def _temperature_holds(e: Evidence) -> str | None:
    v, why = e.value(MOUNT_TEMP)
    if why:
        return why
    low, high = e.cfg.mount_temperature_min, e.cfg.mount_temperature_max
    if low <= v <= high:
        return None
    return f"the mount temperature {_celsius(v)} is still outside {_celsius(low)} to {_celsius(high)}"


MOUNT_TEMPERATURE_RECORD = Condition(
    MOUNT_TEMPERATURE,
    PUMP_FEED,
    (MOUNT_TEMP,),
    check=lambda r: (
        check_mount_temperature(
            r.t, r.column(MOUNT_TEMP), r.cfg.mount_temperature_min, r.cfg.mount_temperature_max
        )
        if r.has(MOUNT_TEMP)
        else UNJUDGED
    ),
    still_holds=_temperature_holds,
    keys=("guard.mount_temperature_min", "guard.mount_temperature_max"),
    summary="trips when the mount temperature leaves its window; clears on a fresh reading inside it",
)

# --------------------------------------------------------------------------------------------
# The pump current is above its limit (measured above max_current + current_tolerance, or the
# setpoint above max_current)


def check_over_current(
    times: object,
    measured: object | None,
    setpoint: object | None,
    max_current: float,
    tolerance: float,
) -> TripCondition | None:
    """Measured current above ``max_current + tolerance``, or setpoint above ``max_current`` (A)."""
    if not (math.isfinite(max_current) and max_current > 0):
        raise ValueError(f"max_current: expected a positive current in A, got {max_current!r}")
    if not (math.isfinite(tolerance) and tolerance >= 0):
        raise ValueError(f"tolerance: expected a current >= 0 A, got {tolerance!r}")
    found: list[tuple[float, str]] = []
    if measured is not None:
        m = _array(measured, "measured")
        t = _times(times, m.shape[0])
        i = _first(~(m <= max_current + tolerance))
        if i is not None:
            found.append(
                (
                    float(t[i]),
                    (
                        f"pump current {m[i]:.3f} A is above the limit {max_current:g} A "
                        f"(+{tolerance:g} A tolerance) at t={t[i]:.3f} s"
                    ),
                )
            )
    if setpoint is not None:
        s = _array(setpoint, "setpoint")
        t = _times(times, s.shape[0])
        i = _first(~(s <= max_current * (1.0 + 1e-9)))
        if i is not None:
            found.append(
                (
                    float(t[i]),
                    (
                        f"pump current setpoint {s[i]:.3f} A is above the limit "
                        f"{max_current:g} A at t={t[i]:.3f} s"
                    ),
                )
            )
    if not found:
        return None
    seen_at, reason = min(found)
    return TripCondition(OVER_CURRENT, reason, seen_at, PUMP)


def _over_current_check(r: BlockReading) -> Verdict:
    measured, setpoint = r.has(PUMP_CURRENT), r.has(PUMP_SETPOINT)
    if not (measured or setpoint):
        return UNJUDGED
    return check_over_current(
        r.t,
        r.column(PUMP_CURRENT) if measured else None,
        r.column(PUMP_SETPOINT) if setpoint else None,
        r.cfg.max_current,
        r.cfg.current_tolerance,
    )


def _current_holds(e: Evidence) -> str | None:
    m, why = e.value(PUMP_CURRENT)
    if why:
        return why
    s, why = e.value(PUMP_SETPOINT)
    if why:
        return why
    limit = e.cfg.max_current
    if m <= limit + e.cfg.current_tolerance and s <= limit * (1 + 1e-9):
        return None
    return f"the pump current ({m:.3f} A, setpoint {s:.3f} A) is still above the limit {limit:g} A"


OVER_CURRENT_RECORD = Condition(
    OVER_CURRENT,
    PUMP_FEED,
    (PUMP_CURRENT, PUMP_SETPOINT),
    check=_over_current_check,
    still_holds=_current_holds,
    keys=("guard.max_current", "guard.current_tolerance"),
    summary=(
        "trips when the measured current is above max_current + current_tolerance or the setpoint "
        "above max_current; clears on fresh readings of both within them"
    ),
)

# --------------------------------------------------------------------------------------------
# The pump current does not follow its target (the setpoint while the output reads on, 0 A
# while it reads off), once the monitor's settle time has passed since the target changed


def check_following(
    times: object,
    measured: object,
    setpoint: object,
    pump_on: object,
    tolerance: float,
    settled: object,
) -> TripCondition | None:
    """The pump current does not follow its target in a settled sample.

    The target is the setpoint while the output reads on and 0 A while it reads off;
    ``settled`` (from `bench.safety.trip_monitor.settled_mask`) says which samples count.
    """
    m = _array(measured, "measured")
    t = _times(times, m.shape[0])
    s = _array(setpoint, "setpoint")
    on = _array(pump_on, "pump_on")
    ok_mask = np.asarray(settled, dtype=bool)
    if not (s.shape == on.shape == ok_mask.shape == m.shape):
        raise ValueError("measured, setpoint, pump_on, settled: expected arrays of the same length")
    target = np.where(on >= 0.5, s, 0.0)
    i = _first(ok_mask & ~(np.abs(m - target) <= tolerance))
    if i is None:
        return None
    state = f"its setpoint {target[i]:.3f} A" if on[i] >= 0.5 else "0 A (output reads off)"
    return TripCondition(
        CURRENT_NOT_FOLLOWING,
        f"pump current {m[i]:.3f} A does not follow {state}: more than {tolerance:g} A apart at t={t[i]:.3f} s",
        float(t[i]),
        PUMP,
    )


def _following_check(r: BlockReading) -> Verdict:
    # r.settled is None without all three channels; no settled sample: nothing to judge yet
    if r.settled is None or not r.settled.any():
        return UNJUDGED
    return check_following(
        r.t,
        r.column(PUMP_CURRENT),
        r.column(PUMP_SETPOINT),
        r.column(PUMP_ON),
        r.cfg.current_tolerance,
        r.settled,
    )


def _following_holds(e: Evidence) -> str | None:
    readings = {}
    for channel in (PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON):
        v, why = e.value(channel)
        if why:
            return why
        readings[channel] = v
    target = readings[PUMP_SETPOINT] if readings[PUMP_ON] >= 0.5 else 0.0
    if abs(readings[PUMP_CURRENT] - target) <= e.cfg.current_tolerance:
        return None
    return f"the pump current {readings[PUMP_CURRENT]:.3f} A still does not follow {target:.3f} A"


FOLLOWING_RECORD = Condition(
    CURRENT_NOT_FOLLOWING,
    PUMP_FEED,
    (PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON),
    check=_following_check,
    still_holds=_following_holds,
    keys=("guard.current_tolerance",),
    summary=(
        "trips when the current is more than current_tolerance from its target in a settled sample "
        "(not within the settle time of a change); clears on fresh readings that follow it"
    ),
)

# --------------------------------------------------------------------------------------------
# The pump output reads on although the guard commanded it off


def check_output_unexpected(
    times: object, pump_on: object, off_since: float, grace: float
) -> TripCondition | None:
    """The output reads on in a sample taken more than ``grace`` s after it was commanded off."""
    on = _array(pump_on, "pump_on")
    t = _times(times, on.shape[0])
    i = _first((t > off_since + grace) & ~(on < 0.5))
    if i is None:
        return None
    return TripCondition(
        OUTPUT_UNEXPECTED,
        f"pump output reads on at t={t[i]:.3f} s although the guard commanded it off at t={off_since:.3f} s",
        float(t[i]),
        PUMP,
    )


OUTPUT_ON_RECORD = Condition(
    OUTPUT_UNEXPECTED,
    PUMP_FEED,
    (PUMP_ON,),
    check=lambda r: (
        check_output_unexpected(r.t, r.column(PUMP_ON), r.output_off_since, r.monitor.output_grace)
        if r.has(PUMP_ON) and r.output_off_since is not None
        else UNJUDGED
    ),
    still_holds=output_reads_off,
    summary=(
        "trips when the output reads on more than the output grace after the guard commanded it off; "
        "clears on a fresh reading that shows it off"
    ),
    holds_on_driver=driver_output_reads_off,
)

# --------------------------------------------------------------------------------------------
# The pump output reads off although the guard commanded it on (another connection switched it
# off, or the driver's own protection did: the guard's view of the pump is then wrong)


def check_output_off_unexpected(
    times: object, pump_on: object, on_since: float, grace: float
) -> TripCondition | None:
    """The output reads off in a sample taken more than ``grace`` s after it was commanded on."""
    on = _array(pump_on, "pump_on")
    t = _times(times, on.shape[0])
    i = _first((t > on_since + grace) & ~(on >= 0.5))
    if i is None:
        return None
    return TripCondition(
        OUTPUT_OFF_UNEXPECTED,
        f"pump output reads off at t={t[i]:.3f} s although the guard commanded it on at t={on_since:.3f} s "
        "(switched off by another connection or by the driver's own protection?)",
        float(t[i]),
        PUMP,
    )


def _output_off_check(r: BlockReading) -> Verdict:
    # an open interlock, or another condition of this reading, already explains it
    if r.has(PUMP_ON) and r.output_on_since is not None and not r.found and INTERLOCK_OPEN not in r.active:
        return check_output_off_unexpected(r.t, r.column(PUMP_ON), r.output_on_since, r.monitor.output_grace)
    return None if r.output_off_since is not None else UNJUDGED  # commanded off: no longer applies


OUTPUT_OFF_RECORD = Condition(
    OUTPUT_OFF_UNEXPECTED,
    PUMP_FEED,
    (PUMP_ON,),
    check=_output_off_check,
    # The guard switched the pump off on the trip: what stays is to find out why the output
    # went off; the person acknowledging confirms they did.
    still_holds=cleared_by_acknowledgement,
    summary=(
        "trips when the output reads off more than the output grace after the guard commanded it on "
        "(unless the interlock or another condition of the same reading explains it); cleared by "
        "acknowledging"
    ),
)
