"""Trip conditions on the instruments as a whole: communication, staleness, error queues, and
the pump power calibration.

One section per condition: its check, its clear rule, its `Condition` record. The records are
listed in the one table, `bench.safety.conditions.CONDITIONS`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from bench.safety.condition_record import (
    AGE_FEED,
    ERROR_QUEUE_FEED,
    EVENT,
    EXCHANGE_FEED,
    POWER_FEED,
    PUMP,
    UNJUDGED,
    Condition,
    Evidence,
    ExchangeReading,
    TripCondition,
    Verdict,
    cleared_by_acknowledgement,
)

COMM_PREFIX = "comm_failure."
STALE_PREFIX = "stale."
DEVICE_ERROR = "device_error"
POWER_CALIBRATION = "power_calibration"

#: Largest factor by which the bench file's pump power may differ from a measured one. A
#: driver's calibration and a monitor photodiode agree with a careful bench-file calibration
#: to some ten per cent; a factor 2 is a wrong calibration, not drift (common practice, no
#: source).
CALIBRATION_FACTOR = 2.0

#: W; below this on both sides the powers are too small to compare (noise, offsets).
CALIBRATION_FLOOR = 1e-3


def comm_condition(source: str) -> str:
    """Condition name for failing communication with ``source`` (``"comm_failure.pump"``)."""
    return COMM_PREFIX + source


def stale_condition(source: str) -> str:
    """Condition name for stale readings from ``source`` (``"stale.detector"``)."""
    return STALE_PREFIX + source


# --------------------------------------------------------------------------------------------
# comm_failures consecutive failed exchanges with an instrument, or a lost connection


def check_comm(
    source: str, failures: int, limit: int, t: float, detail: str = "", lost: bool = False
) -> TripCondition | None:
    """``limit`` consecutive failed exchanges with ``source``, or a lost connection."""
    if limit < 1:
        raise ValueError(f"limit: expected at least 1, got {limit!r}")
    last = f" (last: {detail})" if detail else ""
    if lost:
        return TripCondition(
            comm_condition(source), f"connection to the {source} lost at t={t:.3f} s{last}", t, source
        )
    if failures >= limit:
        return TripCondition(
            comm_condition(source),
            f"{failures} consecutive failed exchanges with the {source} (trips at {limit}){last}",
            t,
            source,
        )
    return None


def _comm_check(r: ExchangeReading) -> Verdict:
    if r.ok and not r.lost:
        return None
    found = check_comm(r.source, r.failures, r.cfg.comm_failures, r.t, r.detail, r.lost)
    return UNJUDGED if found is None else found  # fewer failures than the limit: not yet


def _comm_holds(e: Evidence) -> str | None:
    if e.latest.comm_failures.get(e.source, 0) > 0:
        return f"the exchanges with the {e.source} still fail"
    return e.fresh(e.latest.comm_ok_at.get(e.source), f"successful {e.source} exchange")


COMM_RECORD = Condition(
    COMM_PREFIX,
    EXCHANGE_FEED,
    ("exchange ok/failed/lost",),
    check=_comm_check,
    still_holds=_comm_holds,
    keys=("guard.comm_failures",),
    summary=(
        "trips after comm_failures failed exchanges in a row with an instrument, or a lost connection; "
        "clears on a fresh successful exchange"
    ),
    per_source=True,
)

# --------------------------------------------------------------------------------------------
# No fresh reading from a source for longer than stale_after


def check_stale(source: str, now: float, newest: float, stale_after: float) -> TripCondition | None:
    """No reading from ``source`` newer than ``stale_after`` s before ``now``."""
    age = now - newest
    if age > stale_after:
        return TripCondition(
            stale_condition(source),
            f"no fresh {source} reading for {age:.3f} s (trips after {stale_after:g} s)",
            now,
            source,
        )
    return None


STALE_RECORD = Condition(
    STALE_PREFIX,
    AGE_FEED,
    ("time of the newest reading",),
    # a fresh reading clears it (`TripMonitor` does, as it arrives); younger: not judged here
    check=lambda r: check_stale(r.source, r.now, r.newest, r.cfg.stale_after) or UNJUDGED,
    still_holds=lambda e: e.fresh(e.latest.reading_times.get(e.source), e.source),
    keys=("guard.stale_after",),
    summary="trips when a source gives no fresh reading for stale_after; clears on a fresh reading",
    per_source=True,
)

# --------------------------------------------------------------------------------------------
# An instrument reports a device error (its error queue, read while the pump emits)


def check_device_errors(source: str, entries: Sequence[tuple[int, str]], t: float) -> TripCondition | None:
    """``source`` reported errors ``(code, text)`` from its queue, read at run-clock time ``t``."""
    if not entries:
        return None
    listed = "; ".join(f"{code}, {text!r}" for code, text in entries)
    return TripCondition(
        DEVICE_ERROR, f"the {source} reported a device error at t={t:.3f} s: {listed}", float(t), source
    )


DEVICE_ERROR_RECORD = Condition(
    DEVICE_ERROR,
    ERROR_QUEUE_FEED,
    ("error-queue entries",),
    check=lambda r: check_device_errors(r.source, r.entries, r.t),
    # An error entry is an event: the person acknowledging confirms the driver was checked.
    still_holds=cleared_by_acknowledgement,
    summary="trips when an instrument's error queue holds an entry while emitting; cleared by acknowledging",
    kind=EVENT,
)

# --------------------------------------------------------------------------------------------
# The pump power by the bench file's calibration disagrees by more than CALIBRATION_FACTOR with
# the power the pump driver reports, or with the pump monitor read through its responsivity (a
# calibration that makes the pump look weak also makes the eyewear checklist ask too little)


def check_power_calibration(
    expected_w: float,
    measured_w: float,
    current_a: float,
    what: str,
    t: float,
    factor: float = CALIBRATION_FACTOR,
) -> TripCondition | None:
    """The bench file's pump power at ``current_a`` (``expected_w``) against ``measured_w``.

    ``what`` names the measurement (``"the pump driver's power reading"``). Returns a condition
    with both figures when they differ by more than ``factor`` either way; None when they agree
    or both are below `CALIBRATION_FLOOR`.
    """
    if not (math.isfinite(factor) and factor > 1):
        raise ValueError(f"factor: expected a number above 1, got {factor!r}")
    if not (math.isfinite(expected_w) and math.isfinite(measured_w)):
        return None
    if max(expected_w, measured_w) < CALIBRATION_FLOOR:
        return None
    low, high = sorted((max(expected_w, 0.0), max(measured_w, 0.0)))
    if high <= factor * low:
        return None
    ratio = "more than 1e6" if low <= 0 or high / low > 1e6 else f"{high / low:.3g}"
    return TripCondition(
        POWER_CALIBRATION,
        f"pump power calibration disagrees with {what}: the bench file gives {expected_w:.4g} W at "
        f"{current_a:.4g} A (pump.slope_efficiency, pump.threshold_current), {what} gives {measured_w:.4g} W, "
        f"a factor {ratio} apart (at most {factor:g} allowed); check the calibration before emitting again "
        f"(the eyewear checklist depends on it) at t={t:.3f} s",
        float(t),
        PUMP,
    )


POWER_RECORD = Condition(
    POWER_CALIBRATION,
    POWER_FEED,
    ("calibrated pump power", "measured pump power"),
    check=lambda r: check_power_calibration(r.expected_w, r.measured_w, r.current_a, r.what, r.t),
    # The pump is off after the trip; the person acknowledging confirms the calibration was
    # checked (emitting again with it unchanged trips again).
    still_holds=cleared_by_acknowledgement,
    keys=("pump.slope_efficiency", "pump.threshold_current"),
    summary=(
        f"trips when the calibrated pump power and a measured one differ by more than a factor "
        f"{CALIBRATION_FACTOR:g} while emitting at a settled current; cleared by acknowledging"
    ),
    kind=EVENT,
)
