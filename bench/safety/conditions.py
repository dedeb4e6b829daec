"""The trip conditions: one `Condition` record each, in one table, `CONDITIONS`.

Each record (`bench.safety.condition_record.Condition`) holds one condition's name, the feed
and channels it judges, its check (reading -> trip), its clear rule (``still_holds``, used when
a trip is acknowledged), its bench-file keys and a summary in plain words. The records are
defined beside their pure checks, one section per condition, in `bench.safety.pump_conditions`
(interlock, mount temperature, over-current, current not following, output on or off against
the command), `bench.safety.detector_conditions` (near full scale, transmission jump) and
`bench.safety.instrument_conditions` (communication, stale readings, device errors, pump power
calibration); the guard's own conditions are below. `bench.safety.trip_monitor.TripMonitor`
loops over this table in every feed, in table order; `why_still_holds` looks the clear rule up
here. Adding a condition is adding one record to `CONDITIONS`.

Limits and defaults are choices of the trade (common practice, no source); the limits
themselves come from the bench file's ``[guard]`` table.

This is a second safety layer only: it never replaces the hardware interlock, the laser safety
officer, ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

from bench.config import GuardConfig
from bench.records import PUMP_ON
from bench.safety.condition_record import (
    DETECTOR,
    GUARD_FEED,
    PUMP,
    Condition,
    Evidence,
    Latest,
    TripCondition,
    cleared_by_acknowledgement,
    nothing_to_read,
)
from bench.safety.detector_conditions import (
    DETECTOR_CHANNELS,
    FULL_SCALE_RECORD,
    JUMP_RECORD,
    NEAR_FULL_SCALE,
    TRANSMISSION_JUMP,
    check_full_scale,
    check_transmission_jump,
)
from bench.safety.guard import OPERATOR_STOP, PUMP_COMMAND_FAILED, PUMP_OFF_FAILED
from bench.safety.instrument_conditions import (
    CALIBRATION_FACTOR,
    CALIBRATION_FLOOR,
    COMM_PREFIX,
    COMM_RECORD,
    DEVICE_ERROR,
    DEVICE_ERROR_RECORD,
    POWER_CALIBRATION,
    POWER_RECORD,
    STALE_PREFIX,
    STALE_RECORD,
    check_comm,
    check_device_errors,
    check_power_calibration,
    check_stale,
    comm_condition,
    stale_condition,
)
from bench.safety.pump_conditions import (
    CURRENT_NOT_FOLLOWING,
    FOLLOWING_RECORD,
    INTERLOCK_OPEN,
    INTERLOCK_RECORD,
    MOUNT_TEMPERATURE,
    MOUNT_TEMPERATURE_RECORD,
    OUTPUT_OFF_RECORD,
    OUTPUT_OFF_UNEXPECTED,
    OUTPUT_ON_RECORD,
    OUTPUT_UNEXPECTED,
    OVER_CURRENT,
    OVER_CURRENT_RECORD,
    check_following,
    check_interlock,
    check_mount_temperature,
    check_output_off_unexpected,
    check_output_unexpected,
    check_over_current,
    driver_output_reads_off,
    output_reads_off,
)

# --------------------------------------------------------------------------------------------
# Conditions of the guard itself (`bench.safety.guard`): only their clear rules are here

GUARD_RECORDS = (
    Condition(
        PUMP_OFF_FAILED,
        GUARD_FEED,
        (PUMP_ON,),
        check=None,
        still_holds=output_reads_off,
        summary="the off command failed after its retries; clears on a fresh reading of the output off",
        holds_on_driver=driver_output_reads_off,
    ),
    Condition(
        PUMP_COMMAND_FAILED,
        GUARD_FEED,
        (PUMP_ON,),
        check=None,
        still_holds=output_reads_off,
        summary="an on, current or shutter command failed; clears on a fresh reading of the output off",
        holds_on_driver=driver_output_reads_off,
    ),
    Condition(
        OPERATOR_STOP,
        GUARD_FEED,
        (),
        check=None,
        still_holds=cleared_by_acknowledgement,
        summary="a person tripped the guard; cleared by acknowledging",
        holds_on_driver=nothing_to_read,
    ),
)

# --------------------------------------------------------------------------------------------
# The table

#: Every trip condition, in the order each feed judges them (a pump reading's trips are tripped
#: in this order, and the first is the reason the guard shows).
CONDITIONS: list[Condition] = [
    INTERLOCK_RECORD,
    MOUNT_TEMPERATURE_RECORD,
    OVER_CURRENT_RECORD,
    FOLLOWING_RECORD,
    OUTPUT_ON_RECORD,
    OUTPUT_OFF_RECORD,
    FULL_SCALE_RECORD,
    JUMP_RECORD,
    COMM_RECORD,
    STALE_RECORD,
    DEVICE_ERROR_RECORD,
    POWER_RECORD,
    *GUARD_RECORDS,
]


def conditions_on(feed: str) -> list[Condition]:
    """The records judged by ``feed``, in table order."""
    return [c for c in CONDITIONS if c.feed == feed]


def condition_named(condition: str) -> tuple[Condition, str] | None:
    """The record of ``condition`` and its source ("" unless per source), or None if unknown."""
    for record in CONDITIONS:
        source = record.names(condition)
        if source is not None:
            return record, source
    return None


def why_still_holds(
    condition: str,
    latest: Latest,
    cfg: GuardConfig,
    now: float,
    since: float | None = None,
) -> str | None:
    """Why ``condition`` still holds on the newest readings, or None once it has cleared.

    A condition counts as cleared only on readings taken after ``since`` (the trip's
    ``seen_at``) and not older than ``cfg.stale_after``. An unknown condition never clears here
    (it must be reported cleared by whoever raised it).
    """
    if condition in latest.active:
        return latest.active[condition].reason
    found = condition_named(condition)
    if found is None:
        return f"cannot tell whether {condition!r} has cleared: it must be reported cleared explicitly"
    record, source = found
    return record.still_holds(Evidence(latest, cfg, now, since, source))


#: The names this module gathers from the condition modules, for those who import them here.
__all__ = [
    "CALIBRATION_FACTOR",
    "CALIBRATION_FLOOR",
    "COMM_PREFIX",
    "CONDITIONS",
    "CURRENT_NOT_FOLLOWING",
    "DETECTOR",
    "DETECTOR_CHANNELS",
    "DEVICE_ERROR",
    "INTERLOCK_OPEN",
    "MOUNT_TEMPERATURE",
    "NEAR_FULL_SCALE",
    "OUTPUT_OFF_UNEXPECTED",
    "OUTPUT_UNEXPECTED",
    "OVER_CURRENT",
    "POWER_CALIBRATION",
    "PUMP",
    "STALE_PREFIX",
    "TRANSMISSION_JUMP",
    "Condition",
    "Latest",
    "TripCondition",
    "check_comm",
    "check_device_errors",
    "check_following",
    "check_full_scale",
    "check_interlock",
    "check_mount_temperature",
    "check_output_off_unexpected",
    "check_output_unexpected",
    "check_over_current",
    "check_power_calibration",
    "check_stale",
    "check_transmission_jump",
    "comm_condition",
    "condition_named",
    "conditions_on",
    "stale_condition",
    "why_still_holds",
]
