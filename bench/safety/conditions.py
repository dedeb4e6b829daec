"""Trip conditions: pure checks on pump and detector blocks and on communication status.

Each ``check_*`` function takes the numpy columns of one block (vectorised, no per-sample
Python loop) and returns a `TripCondition` (condition name, reason, the run-clock time of the
first reading that showed it) or None. `TripMonitor` holds the little state the checks need
between blocks (newest reading times, consecutive communication failures, the last
probe-transmission window, when the pump last changed), reports each condition once when it
starts to hold, and answers `TripMonitor.why_still_holds` for acknowledging a trip.

Conditions checked:

- the hardware interlock reads open (``interlock`` channel, 1 = closed);
- the mount temperature is outside its window (``mount_temp``, K);
- the pump current is above its limit (measured above ``max_current + current_tolerance``, or
  the setpoint above ``max_current``);
- the pump current does not follow its setpoint (``|measured - target| > current_tolerance``,
  the target being the setpoint while the output reads on and 0 while it reads off), once
  ``settle_time`` has passed since the target last changed;
- the pump output reads on although the guard commanded it off;
- the pump output reads off although the guard commanded it on (another connection switched it
  off, or the driver's own protection did: the guard's view of the pump is then wrong);
- a detector channel (``probe``, ``reference``, ``pump_monitor``) at or above
  ``full_scale_fraction`` of its range;
- ``comm_failures`` consecutive failed exchanges with the pump driver or the detector, or a
  lost connection;
- no fresh reading from a source for longer than ``stale_after``;
- an instrument reports a device error (its error queue, read while the pump emits);
- the pump power by the bench file's calibration (``pump.slope_efficiency``,
  ``pump.threshold_current``) disagrees by more than `CALIBRATION_FACTOR` with the power the
  pump driver reports, or with the pump monitor read through its responsivity (a calibration
  that makes the pump look weak also makes the eyewear checklist ask too little);
- optionally, a sudden relative change of the probe transmission ``S = probe / reference``
  between consecutive short windows larger than ``transmission_jump`` while the pump did not
  change (parasitic lasing, or an optic that moved). Each window is compared with the one
  before and the one two before, so a step that falls inside a window is still seen whole.

Limits and defaults here are choices of the trade (common practice, no source); the limits
themselves come from the bench file's ``[guard]`` table.
"""

from __future__ import annotations

import math
import threading
from collections import deque
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np

from bench.config import GuardConfig
from bench.safety.guard import OPERATOR_STOP, PUMP_COMMAND_FAILED, PUMP_OFF_FAILED
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

#: How long one poll of the pump driver may take (s): readings stamped this long before a
#: commanded change may already show part of it.
POLL_SPAN = 0.1

#: Source names the monitor tracks.
PUMP = "pump"
DETECTOR = "detector"

INTERLOCK_OPEN = "interlock_open"
MOUNT_TEMPERATURE = "mount_temperature"
OVER_CURRENT = "over_current"
CURRENT_NOT_FOLLOWING = "current_not_following"
OUTPUT_UNEXPECTED = "output_on_unexpected"
OUTPUT_OFF_UNEXPECTED = "output_off_unexpected"
NEAR_FULL_SCALE = "near_full_scale"
TRANSMISSION_JUMP = "transmission_jump"
COMM_PREFIX = "comm_failure."
DEVICE_ERROR = "device_error"
POWER_CALIBRATION = "power_calibration"

#: Largest factor by which the bench file's pump power may differ from a measured one. A
#: driver's calibration and a monitor photodiode agree with a careful bench-file calibration
#: to some ten per cent; a factor 2 is a wrong calibration, not drift (common practice, no
#: source).
CALIBRATION_FACTOR = 2.0

#: W; below this on both sides the powers are too small to compare (noise, offsets).
CALIBRATION_FLOOR = 1e-3
STALE_PREFIX = "stale."

#: Detector channels checked against full scale.
DETECTOR_CHANNELS = (PROBE, REFERENCE, PUMP_MONITOR)

#: Defaults of `TripMonitor` (common practice, no source).
DEFAULT_SETTLE_TIME = 0.2  # s after a setpoint or output change before "not following" counts
DEFAULT_JUMP_WINDOW = 0.01  # s, length of the windows compared for a transmission jump
DEFAULT_MIN_REFERENCE = 0.02  # fraction of full scale below which S is not computed
DEFAULT_PUMP_STEADY = 0.05  # relative change of the pump monitor that counts as a pump change

#: Times closer than this are equal (float rounding of sample times), s.
_TIME_SLACK = 1e-9


def comm_condition(source: str) -> str:
    """Condition name for failing communication with ``source`` (``"comm_failure.pump"``)."""
    return COMM_PREFIX + source


def stale_condition(source: str) -> str:
    """Condition name for stale readings from ``source`` (``"stale.detector"``)."""
    return STALE_PREFIX + source


@dataclass(frozen=True)
class TripCondition:
    """One failed check: what, why, when (run-clock time of the reading that showed it), where."""

    condition: str
    reason: str
    seen_at: float
    source: str


# --------------------------------------------------------------------------------------------
# Pure checks


def _array(values: object, name: str) -> np.ndarray:
    a = np.asarray(values, dtype=np.float64)
    if a.ndim != 1:
        raise ValueError(f"{name}: expected a 1-D array of samples, got shape {a.shape}")
    return a


def _times(times: object, n: int) -> np.ndarray:
    t = _array(times, "times")
    if t.shape[0] != n:
        raise ValueError(f"times: {t.shape[0]} times for {n} samples")
    return t


def _first(bad: np.ndarray) -> int | None:
    return int(np.argmax(bad)) if bad.any() else None


def _celsius(kelvin: float) -> str:
    return f"{kelvin:.2f} K ({kelvin - 273.15:.2f} degC)"


def check_interlock(times: object, interlock: object) -> TripCondition | None:
    """The hardware interlock reads open (below 0.5, or not a number) in any sample."""
    x = _array(interlock, "interlock")
    t = _times(times, x.shape[0])
    i = _first(~(x >= 0.5))
    if i is None:
        return None
    state = "open" if x[i] < 0.5 else f"not a valid state ({x[i]!r})"
    return TripCondition(INTERLOCK_OPEN, f"hardware interlock reads {state} at t={t[i]:.3f} s", float(t[i]), PUMP)


def check_mount_temperature(times: object, temperature: object, low: float, high: float) -> TripCondition | None:
    """The mount temperature (K) is outside ``[low, high]`` (or not a number) in any sample."""
    if not (math.isfinite(low) and math.isfinite(high) and low < high):
        raise ValueError(f"low, high: expected a finite window low < high, got {low!r}, {high!r}")
    x = _array(temperature, "temperature")
    t = _times(times, x.shape[0])
    i = _first(~((x >= low) & (x <= high)))
    if i is None:
        return None
    v = float(x[i])
    where = "not a number" if not math.isfinite(v) else _celsius(v) + (" is above" if v > high else " is below")
    return TripCondition(
        MOUNT_TEMPERATURE,
        f"mount temperature {where} its window {_celsius(low)} to {_celsius(high)} at t={t[i]:.3f} s",
        float(t[i]),
        PUMP,
    )


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
            found.append((float(t[i]), (f"pump current {m[i]:.3f} A is above the limit {max_current:g} A "
                                        f"(+{tolerance:g} A tolerance) at t={t[i]:.3f} s")))
    if setpoint is not None:
        s = _array(setpoint, "setpoint")
        t = _times(times, s.shape[0])
        i = _first(~(s <= max_current * (1.0 + 1e-9)))
        if i is not None:
            found.append((float(t[i]), (f"pump current setpoint {s[i]:.3f} A is above the limit "
                                        f"{max_current:g} A at t={t[i]:.3f} s")))
    if not found:
        return None
    seen_at, reason = min(found)
    return TripCondition(OVER_CURRENT, reason, seen_at, PUMP)


def settled_mask(
    times: object,
    target: object,
    settle_time: float,
    last_target: float | None,
    last_change: float,
) -> tuple[np.ndarray, float, float]:
    """Which samples are at least ``settle_time`` after the latest change of ``target``.

    State in, state out: ``last_target`` and ``last_change`` describe the stream before this
    block (None and ``-inf`` at the start; the first sample then counts as a change). Returns
    ``(mask, new_last_target, new_last_change)``. Times within 1 ns count as equal.
    """
    x = _array(target, "target")
    t = _times(times, x.shape[0])
    if not (math.isfinite(settle_time) and settle_time >= 0):
        raise ValueError(f"settle_time: expected a time >= 0 s, got {settle_time!r}")
    if x.shape[0] == 0:
        return np.zeros(0, dtype=bool), last_target, last_change  # type: ignore[return-value]
    changed = np.empty(x.shape[0], dtype=bool)
    changed[0] = last_target is None or x[0] != last_target
    changed[1:] = ~(x[1:] == x[:-1])
    change_t = np.where(changed, t, -np.inf)
    latest_change = np.maximum(np.maximum.accumulate(change_t), last_change)
    mask = (t - latest_change) >= settle_time - _TIME_SLACK
    return mask, float(x[-1]), float(latest_change[-1])


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
    ``settled`` (from `settled_mask`) says which samples count.
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


def check_output_unexpected(times: object, pump_on: object, off_since: float, grace: float) -> TripCondition | None:
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


def check_output_off_unexpected(times: object, pump_on: object, on_since: float, grace: float) -> TripCondition | None:
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


def check_full_scale(
    times: object,
    columns: Mapping[str, object],
    full_scale: Mapping[str, float],
    fraction: float,
) -> TripCondition | None:
    """Any detector column at or above ``fraction`` of its full scale (V), or not a number."""
    if not (0 < fraction <= 1):
        raise ValueError(f"fraction: expected 0 < fraction <= 1, got {fraction!r}")
    hits: list[tuple[float, str]] = []
    for name, values in columns.items():
        fs = full_scale[name]
        v = _array(values, name)
        t = _times(times, v.shape[0])
        i = _first(~(np.abs(v) < fraction * fs))
        if i is not None:
            x = float(v[i])
            share = f"{abs(x) / fs * 100:.0f} %" if math.isfinite(x) else "not a number"
            hits.append((float(t[i]), (f"{name} at {x:.4g} V, {share} of its {fs:g} V range (trips at "
                                       f"{fraction * 100:.0f} %) at t={t[i]:.3f} s")))
    if not hits:
        return None
    seen_at, reason = min(hits)
    return TripCondition(NEAR_FULL_SCALE, reason, seen_at, DETECTOR)


def check_transmission_jump(
    t_before: object,
    t_after: object,
    s_before: object,
    s_after: object,
    comparable: object,
    jump: float,
) -> TripCondition | None:
    """A relative change of S between two windows above ``jump``, for pairs that may be compared.

    One entry per pair of windows: their start times, their mean S, and whether the pair may
    be compared (both valid, the pump unchanged between them).
    """
    if not (math.isfinite(jump) and jump > 0):
        raise ValueError(f"jump: expected a positive relative change, got {jump!r}")
    before = _array(s_before, "s_before")
    after = _array(s_after, "s_after")
    t0 = _times(t_before, before.shape[0])
    t1 = _times(t_after, before.shape[0])
    ok = np.asarray(comparable, dtype=bool)
    if not (after.shape == before.shape == ok.shape):
        raise ValueError("s_before, s_after, comparable: expected one entry per pair of windows")
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.abs(after - before) / np.abs(before)
    hit = ok & (rel > jump)
    if not hit.any():
        return None
    i = int(np.argmin(np.where(hit, t1, np.inf)))
    return TripCondition(
        TRANSMISSION_JUMP,
        f"probe transmission S changed by {rel[i] * 100:.0f} % (from {before[i]:.4g} to {after[i]:.4g}) between "
        f"windows {(t1[i] - t0[i]) * 1e3:.3g} ms apart at t={t1[i]:.3f} s while the pump did not change "
        f"(trips above {jump * 100:.0f} %): parasitic lasing or a moved optic?",
        float(t1[i]),
        DETECTOR,
    )


def check_comm(source: str, failures: int, limit: int, t: float, detail: str = "", lost: bool = False) -> TripCondition | None:
    """``limit`` consecutive failed exchanges with ``source``, or a lost connection."""
    if limit < 1:
        raise ValueError(f"limit: expected at least 1, got {limit!r}")
    last = f" (last: {detail})" if detail else ""
    if lost:
        return TripCondition(comm_condition(source), f"connection to the {source} lost at t={t:.3f} s{last}", t, source)
    if failures >= limit:
        return TripCondition(
            comm_condition(source),
            f"{failures} consecutive failed exchanges with the {source} (trips at {limit}){last}",
            t,
            source,
        )
    return None


def check_device_errors(source: str, entries: Sequence[tuple[int, str]], t: float) -> TripCondition | None:
    """``source`` reported errors ``(code, text)`` from its queue, read at run-clock time ``t``."""
    if not entries:
        return None
    listed = "; ".join(f"{code}, {text!r}" for code, text in entries)
    return TripCondition(DEVICE_ERROR, f"the {source} reported a device error at t={t:.3f} s: {listed}",
                         float(t), source)


def check_power_calibration(expected_w: float, measured_w: float, current_a: float, what: str, t: float,
                            factor: float = CALIBRATION_FACTOR) -> TripCondition | None:
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


# --------------------------------------------------------------------------------------------
# What acknowledging needs to know


@dataclass(frozen=True)
class Latest:
    """The newest readings the monitor has seen (a snapshot).

    Attributes
    ----------
    values : mapping
        Pump channel -> (run-clock time, newest value).
    peaks : mapping
        Detector channel -> (time of the newest block's last sample, largest ``|V|`` in that
        block, full scale V).
    reading_times : mapping
        Source -> time of its newest sample.
    comm_failures : mapping
        Source -> consecutive failed exchanges.
    comm_ok_at : mapping
        Source -> time of its newest successful exchange.
    active : mapping
        Condition -> the `TripCondition`, for conditions that currently hold.
    """

    values: Mapping[str, tuple[float, float]]
    peaks: Mapping[str, tuple[float, float, float]]
    reading_times: Mapping[str, float]
    comm_failures: Mapping[str, int]
    comm_ok_at: Mapping[str, float]
    active: Mapping[str, TripCondition]


def _fresh(t: float | None, what: str, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    if t is None:
        return f"no {what} reading yet"
    if since is not None and not t > since:
        return f"no {what} reading since the trip (t={since:.3f} s)"
    if now - t > cfg.stale_after:
        return f"the newest {what} reading is {now - t:.2f} s old"
    return None


def _value(latest: Latest, channel: str, cfg: GuardConfig, now: float, since: float | None) -> tuple[float | None, str | None]:
    entry = latest.values.get(channel)
    why = _fresh(entry[0] if entry else None, channel, cfg, now, since)
    return (None, why) if why else (entry[1], None)  # type: ignore[index]


def _interlock_holds(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    v, why = _value(latest, INTERLOCK, cfg, now, since)
    return why or (None if v >= 0.5 else "the hardware interlock still reads open")


def _temperature_holds(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    v, why = _value(latest, MOUNT_TEMP, cfg, now, since)
    if why:
        return why
    if cfg.mount_temperature_min <= v <= cfg.mount_temperature_max:
        return None
    return (f"the mount temperature {_celsius(v)} is still outside {_celsius(cfg.mount_temperature_min)} to "
            f"{_celsius(cfg.mount_temperature_max)}")


def _current_holds(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    m, why = _value(latest, PUMP_CURRENT, cfg, now, since)
    if why:
        return why
    s, why = _value(latest, PUMP_SETPOINT, cfg, now, since)
    if why:
        return why
    if m <= cfg.max_current + cfg.current_tolerance and s <= cfg.max_current * (1 + 1e-9):
        return None
    return f"the pump current ({m:.3f} A, setpoint {s:.3f} A) is still above the limit {cfg.max_current:g} A"


def _following_holds(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    readings = {}
    for channel in (PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON):
        v, why = _value(latest, channel, cfg, now, since)
        if why:
            return why
        readings[channel] = v
    target = readings[PUMP_SETPOINT] if readings[PUMP_ON] >= 0.5 else 0.0
    if abs(readings[PUMP_CURRENT] - target) <= cfg.current_tolerance:
        return None
    return f"the pump current {readings[PUMP_CURRENT]:.3f} A still does not follow {target:.3f} A"


def _output_off_holds(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    v, why = _value(latest, PUMP_ON, cfg, now, since)
    return why or (None if v < 0.5 else "the pump output still reads on")


def _full_scale_holds(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    if not latest.peaks:
        return "no detector reading yet"
    for channel, (t, peak, fs) in latest.peaks.items():
        why = _fresh(t, f"detector {channel}", cfg, now, since)
        if why:
            return why
        if not peak < cfg.full_scale_fraction * fs:
            return f"{channel} still reaches {peak:.4g} V of its {fs:g} V range"
    return None


def _cleared_by_acknowledgement(latest: Latest, cfg: GuardConfig, now: float, since: float | None) -> str | None:
    return None


_HOLDS = {
    INTERLOCK_OPEN: _interlock_holds,
    MOUNT_TEMPERATURE: _temperature_holds,
    OVER_CURRENT: _current_holds,
    CURRENT_NOT_FOLLOWING: _following_holds,
    OUTPUT_UNEXPECTED: _output_off_holds,
    # The guard switched the pump off on the trip: what stays is to find out why the output
    # went off; the person acknowledging confirms they did.
    OUTPUT_OFF_UNEXPECTED: _cleared_by_acknowledgement,
    # An error entry is an event: the person acknowledging confirms the driver was checked.
    DEVICE_ERROR: _cleared_by_acknowledgement,
    # The pump is off after the trip; the person acknowledging confirms the calibration was
    # checked (emitting again with it unchanged trips again).
    POWER_CALIBRATION: _cleared_by_acknowledgement,
    PUMP_OFF_FAILED: _output_off_holds,
    PUMP_COMMAND_FAILED: _output_off_holds,
    NEAR_FULL_SCALE: _full_scale_holds,
    # A jump is an event, not a state: the person acknowledging confirms the optics were checked.
    TRANSMISSION_JUMP: _cleared_by_acknowledgement,
    OPERATOR_STOP: _cleared_by_acknowledgement,
}


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
    if condition.startswith(COMM_PREFIX):
        source = condition[len(COMM_PREFIX):]
        if latest.comm_failures.get(source, 0) > 0:
            return f"the exchanges with the {source} still fail"
        return _fresh(latest.comm_ok_at.get(source), f"successful {source} exchange", cfg, now, since)
    if condition.startswith(STALE_PREFIX):
        source = condition[len(STALE_PREFIX):]
        return _fresh(latest.reading_times.get(source), source, cfg, now, since)
    check = _HOLDS.get(condition)
    if check is None:
        return f"cannot tell whether {condition!r} has cleared: it must be reported cleared explicitly"
    return check(latest, cfg, now, since)


def condition_cleared(
    condition: str,
    latest: Latest,
    cfg: GuardConfig,
    now: float,
    since: float | None = None,
) -> bool:
    """True once ``condition`` no longer holds on fresh readings (see `why_still_holds`)."""
    return why_still_holds(condition, latest, cfg, now, since) is None


# --------------------------------------------------------------------------------------------
# The monitor


class TripMonitor:
    """Feeds blocks and communication results to the checks and keeps what they need.

    Each ``feed_*`` returns the conditions that *started* to hold with that input (a condition
    that keeps holding is reported once; it is reported again after it clears and returns).
    `active_conditions` lists those holding now. Thread-safe: the pipeline feeds it while a UI
    thread may ask `why_still_holds`.

    Parameters
    ----------
    cfg : GuardConfig
        Limits from the bench file.
    settle_time : float
        s after a change of the current target (setpoint or output state) before the current
        must follow it; also how long S is not compared after the pump changed.
    jump_window : float
        s, length of the windows whose mean S is compared for a transmission jump.
    min_reference_fraction : float
        S is not computed from windows whose reference is below this fraction of full scale
        (probe blocked, dark being taken).
    pump_steady_fraction : float
        A relative change of the pump-monitor channel between two windows above this counts as
        a pump change (the pair is not compared).
    started_at : float or None
        Run-clock time acquisition started; readings are expected from then on (stale checks
        wait for the first reading when None).
    sources : sequence of str
        Sources checked for stale readings.
    output_grace : float or None
        s after the output was commanded off before a reading that shows it on trips
        (``settle_time`` plus ``lag_allowance`` when None).
    lag_allowance : float
        Run-clock s by which a command may reach the instrument late, or a reading's time stamp
        may be off from the guard's clock (one pump poll, `POLL_SPAN`, by default). Readings
        this close to a commanded change are not judged against it. On an accelerated
        simulated bench the caller scales it by the speed: a few milliseconds of transport
        delay are then seconds of run-clock time.
    """

    def __init__(
        self,
        cfg: GuardConfig,
        *,
        settle_time: float = DEFAULT_SETTLE_TIME,
        jump_window: float = DEFAULT_JUMP_WINDOW,
        min_reference_fraction: float = DEFAULT_MIN_REFERENCE,
        pump_steady_fraction: float = DEFAULT_PUMP_STEADY,
        started_at: float | None = None,
        sources: Sequence[str] = (PUMP, DETECTOR),
        output_grace: float | None = None,
        lag_allowance: float = POLL_SPAN,
    ) -> None:
        if not isinstance(cfg, GuardConfig):
            raise ValueError(f"cfg: expected a GuardConfig, got {type(cfg).__name__}")
        for name, value in (("settle_time", settle_time), ("jump_window", jump_window),
                            ("lag_allowance", lag_allowance)):
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise ValueError(f"{name}: expected a time >= 0 s, got {value!r}")
        if jump_window <= 0:
            raise ValueError(f"jump_window: expected a positive time, got {jump_window!r}")
        for name, value in (("min_reference_fraction", min_reference_fraction),
                            ("pump_steady_fraction", pump_steady_fraction)):
            if not (isinstance(value, (int, float)) and 0 < value < 1):
                raise ValueError(f"{name}: expected a fraction between 0 and 1, got {value!r}")
        self.cfg = cfg
        self.settle_time = float(settle_time)
        self.jump_window = float(jump_window)
        self.min_reference_fraction = float(min_reference_fraction)
        self.pump_steady_fraction = float(pump_steady_fraction)
        self.started_at = started_at
        self.sources = tuple(sources)
        self.lag_allowance = float(lag_allowance)
        self.output_grace = self.settle_time + self.lag_allowance if output_grace is None else float(output_grace)
        self._lock = threading.Lock()
        self._active: dict[str, TripCondition] = {}
        self._values: dict[str, tuple[float, float]] = {}
        self._peaks: dict[str, tuple[float, float, float]] = {}
        self._reading_times: dict[str, float] = {}
        self._failures: dict[str, int] = {}
        self._comm_ok_at: dict[str, float] = {}
        self._last_target: float | None = None
        self._last_change = -math.inf
        self._pump_changes: deque[float] = deque(maxlen=32)
        self._commanded_changes: deque[float] = deque(maxlen=8)
        self._reset_windows()

    # -- small helpers ---------------------------------------------------------------------
    def _reset_windows(self) -> None:
        self._carry: dict[str, np.ndarray] | None = None
        self._carry_next: float | None = None
        # The last two windows: (start, end, S, valid, pump monitor mean).
        self._prev: list[tuple[float, float, float, bool, float]] = []

    def _level(self, condition: str, result: TripCondition | None, found: list[TripCondition]) -> None:
        if result is None:
            self._active.pop(condition, None)
        elif condition not in self._active:
            self._active[condition] = result
            found.append(result)

    def _seen(self, source: str, t_end: float) -> None:
        self._reading_times[source] = max(t_end, self._reading_times.get(source, -math.inf))
        self._active.pop(stale_condition(source), None)

    # -- feeding ---------------------------------------------------------------------------
    def feed_pump(self, block: Block, *, output_off_since: float | None = None,
                  output_on_since: float | None = None,
                  received_at: float | None = None) -> list[TripCondition]:
        """Check one pump block (channels ``pump_current``, ``pump_setpoint``, ``pump_on``,
        ``mount_temp``, ``interlock``; any subset).

        ``output_off_since`` is the run-clock time the guard last commanded the output off
        (None while it is commanded on): a later reading showing it on trips.
        ``output_on_since`` is the time it commanded the output on (None while commanded off):
        a later reading showing it off trips.
        """
        if not isinstance(block, Block):
            raise ValueError(f"block: expected a Block, got {type(block).__name__}")
        found: list[TripCondition] = []
        if block.n == 0:
            return found
        cfg = self.cfg
        t = block.times()
        ch = set(block.channels)
        col = block.column
        with self._lock:
            self._seen(PUMP, block.t_end if received_at is None else max(block.t_end, received_at))
            for name in block.channels:
                self._values[name] = (float(t[-1]), float(col(name)[-1]))
            if INTERLOCK in ch:
                self._level(INTERLOCK_OPEN, check_interlock(t, col(INTERLOCK)), found)
            if MOUNT_TEMP in ch:
                self._level(MOUNT_TEMPERATURE, check_mount_temperature(
                    t, col(MOUNT_TEMP), cfg.mount_temperature_min, cfg.mount_temperature_max), found)
            if PUMP_CURRENT in ch or PUMP_SETPOINT in ch:
                self._level(OVER_CURRENT, check_over_current(
                    t, col(PUMP_CURRENT) if PUMP_CURRENT in ch else None,
                    col(PUMP_SETPOINT) if PUMP_SETPOINT in ch else None,
                    cfg.max_current, cfg.current_tolerance), found)
            if {PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON} <= ch:
                on = col(PUMP_ON)
                target = np.where(on >= 0.5, col(PUMP_SETPOINT), 0.0)
                before = self._last_change
                mask, self._last_target, self._last_change = settled_mask(
                    t, target, self.settle_time, self._last_target, self._last_change)
                if self._last_change > before:
                    self._pump_changes.append(self._last_change)
                if self._commanded_changes:
                    # A reading polled across a commanded change (or within the settle time
                    # after it) may mix the values before and after: do not judge it.
                    changes = np.fromiter(self._commanded_changes, dtype=np.float64)
                    lag = self.lag_allowance
                    near = (t[:, None] >= changes[None, :] - lag) & (
                        t[:, None] < changes[None, :] + self.settle_time + lag)
                    mask &= ~near.any(axis=1)
                if mask.any():
                    self._level(CURRENT_NOT_FOLLOWING, check_following(
                        t, col(PUMP_CURRENT), col(PUMP_SETPOINT), on, cfg.current_tolerance, mask), found)
            if PUMP_ON in ch and output_off_since is not None:
                self._level(OUTPUT_UNEXPECTED, check_output_unexpected(
                    t, col(PUMP_ON), output_off_since, self.output_grace), found)
            if PUMP_ON in ch and output_on_since is not None and not found and INTERLOCK_OPEN not in self._active:
                # (an open interlock, or another condition of this reading, already explains it)
                self._level(OUTPUT_OFF_UNEXPECTED, check_output_off_unexpected(
                    t, col(PUMP_ON), output_on_since, self.output_grace), found)
            elif output_off_since is not None:
                self._active.pop(OUTPUT_OFF_UNEXPECTED, None)
        return found

    def feed_detector(
        self,
        block: Block,
        full_scale: float | Mapping[str, float],
        *,
        pump_steady: bool = True,
        received_at: float | None = None,
    ) -> list[TripCondition]:
        """Check one detector block (``probe``, ``reference``, ``pump_monitor`` in V).

        ``full_scale`` is the detector range in V (one for all channels, or per channel).
        ``pump_steady=False`` says the pump is being changed or modulated on purpose (chopped
        mode, a sweep step): S is then not compared across this block.
        """
        if not isinstance(block, Block):
            raise ValueError(f"block: expected a Block, got {type(block).__name__}")
        present = [c for c in DETECTOR_CHANNELS if c in block.channels]
        ranges = _ranges(full_scale, present)
        found: list[TripCondition] = []
        if block.n == 0:
            return found
        t = block.times()
        with self._lock:
            # fresh = it arrived: a digitiser's data lag behind the clock by its fetch latency
            self._seen(DETECTOR, block.t_end if received_at is None else max(block.t_end, received_at))
            columns = {c: block.column(c) for c in present}
            for c, v in columns.items():
                peak = float(np.max(np.abs(v)))  # NaN propagates: a NaN reading never clears
                self._peaks[c] = (float(t[-1]), peak, ranges[c])
            if columns:
                self._level(NEAR_FULL_SCALE, check_full_scale(t, columns, ranges, self.cfg.full_scale_fraction), found)
            if self.cfg.transmission_jump is not None and PROBE in columns and REFERENCE in columns:
                jump = self._transmission(block, t, columns, ranges, pump_steady)
                if jump is not None:
                    found.append(jump)
        return found

    def _transmission(
        self,
        block: Block,
        t: np.ndarray,
        columns: Mapping[str, np.ndarray],
        ranges: Mapping[str, float],
        pump_steady: bool,
    ) -> TripCondition | None:
        dt = block.dt
        w = max(1, round(self.jump_window / dt)) if dt > 0 else 1
        names = [c for c in (PROBE, REFERENCE, PUMP_MONITOR) if c in columns]
        data = {c: columns[c] for c in names}
        data["t"] = t
        if self._carry is not None and set(self._carry) != set(data):
            self._reset_windows()  # other channels than before: start afresh
        if self._carry is not None and dt > 0:
            if self._carry_next is not None and abs(t[0] - self._carry_next) <= 0.5 * dt:
                data = {key: np.concatenate((self._carry[key], v)) for key, v in data.items()}
            else:
                self._prev = []  # a gap: the windows would not be consecutive
        n = data["t"].shape[0]
        k = n // w
        use = k * w
        self._carry = {key: v[use:] for key, v in data.items()}
        self._carry_next = float(t[-1] + dt) if dt > 0 else None
        if k == 0:
            return None
        means = {c: data[c][:use].reshape(k, w).mean(axis=1) for c in names}
        ref = means[REFERENCE]
        with np.errstate(divide="ignore", invalid="ignore"):
            s = means[PROBE] / ref
        valid = np.isfinite(s) & (ref > self.min_reference_fraction * ranges[REFERENCE])
        pm = means.get(PUMP_MONITOR, np.full(k, math.nan))
        # The windows of this block, after the (up to two) last windows of the stream so far.
        prev = self._prev
        start = np.concatenate(([p[0] for p in prev], data["t"][:use:w]))
        end = np.concatenate(([p[1] for p in prev], data["t"][w - 1:use:w]))
        s_all = np.concatenate(([p[2] for p in prev], s))
        valid_all = np.concatenate((np.array([p[3] for p in prev], dtype=bool), valid))
        pm_all = np.concatenate(([p[4] for p in prev], pm))
        # Each new window against the one before and the one two before: a step inside a window
        # is split between two consecutive pairs, but the pair one window apart sees it whole.
        new = np.arange(len(prev), len(prev) + k)
        after = np.concatenate([new[new >= lag] for lag in (1, 2)])
        before = np.concatenate([new[new >= lag] - lag for lag in (1, 2)])
        comparable = valid_all[before] & valid_all[after]
        if PUMP_MONITOR in means:
            a, b = pm_all[before], pm_all[after]
            allowed = np.maximum(self.pump_steady_fraction * np.maximum(np.abs(a), np.abs(b)),
                                 0.01 * ranges[PUMP_MONITOR])
            comparable &= np.abs(b - a) <= allowed
        if self._pump_changes:
            changes = np.fromiter(self._pump_changes, dtype=np.float64)
            # the change takes effect up to lag_allowance after (or, by the readings' clock,
            # before) the time it was commanded at
            lag = self.lag_allowance
            near = ((changes[None, :] > start[before, None] - self.settle_time - lag)
                    & (changes[None, :] <= end[after, None] + lag))
            comparable &= ~near.any(axis=1)
        if not pump_steady:
            comparable[:] = False
        result = check_transmission_jump(start[before], start[after], s_all[before], s_all[after], comparable,
                                         self.cfg.transmission_jump)
        keep = range(max(0, len(start) - 2), len(start))
        if result is not None:  # compare later windows with those after the jump only (one report)
            keep = [i for i in keep if start[i] >= result.seen_at]
        self._prev = [(float(start[i]), float(end[i]), float(s_all[i]), bool(valid_all[i]), float(pm_all[i]))
                      for i in keep]
        return result

    def comm_result(self, source: str, ok: bool, t: float, detail: str = "", lost: bool = False) -> list[TripCondition]:
        """Record one exchange with ``source`` (``"pump"``, ``"detector"``) at run-clock time ``t``.

        ``lost=True`` (the connection dropped) trips at once; otherwise ``comm_failures``
        consecutive failures trip. A success clears the condition.
        """
        if not isinstance(source, str) or not source:
            raise ValueError(f"source: expected a source name, got {source!r}")
        found: list[TripCondition] = []
        condition = comm_condition(source)
        with self._lock:
            if ok and not lost:
                self._failures[source] = 0
                self._comm_ok_at[source] = float(t)
                self._active.pop(condition, None)
                return found
            self._failures[source] = self._failures.get(source, 0) + 1
            result = check_comm(source, self._failures[source], self.cfg.comm_failures, float(t), detail, lost)
            if result is not None:
                self._level(condition, result, found)
        return found

    def check_stale(self, now: float) -> list[TripCondition]:
        """Conditions for sources whose newest reading is older than ``stale_after``."""
        found: list[TripCondition] = []
        with self._lock:
            for source in self.sources:
                newest = self._reading_times.get(source, self.started_at)
                if newest is None:
                    continue
                result = check_stale(source, float(now), newest, self.cfg.stale_after)
                if result is not None:
                    self._level(stale_condition(source), result, found)
        return found

    def note_pump_change(self, t: float) -> None:
        """The pump was changed on purpose at run-clock time ``t`` (S jumps are then expected)."""
        with self._lock:
            self._pump_changes.append(float(t))
            self._commanded_changes.append(float(t))

    def reset_transmission(self) -> None:
        """Forget the last S window (after a dark, a probe-wavelength step, a shutter move)."""
        with self._lock:
            self._reset_windows()

    # -- asking ----------------------------------------------------------------------------
    def active_conditions(self) -> dict[str, TripCondition]:
        """Conditions that hold now, by name."""
        with self._lock:
            return dict(self._active)

    def latest(self) -> Latest:
        """A snapshot of the newest readings."""
        with self._lock:
            return Latest(
                values=MappingProxyType(dict(self._values)),
                peaks=MappingProxyType(dict(self._peaks)),
                reading_times=MappingProxyType(dict(self._reading_times)),
                comm_failures=MappingProxyType(dict(self._failures)),
                comm_ok_at=MappingProxyType(dict(self._comm_ok_at)),
                active=MappingProxyType(dict(self._active)),
            )

    def why_still_holds(self, condition: str, now: float, since: float | None = None) -> str | None:
        """Why ``condition`` still holds, or None once fresh readings show it cleared."""
        return why_still_holds(condition, self.latest(), self.cfg, now, since)

    def condition_cleared(self, condition: str, now: float, since: float | None = None) -> bool:
        return self.why_still_holds(condition, now, since) is None


def _ranges(full_scale: float | Mapping[str, float], channels: Sequence[str]) -> dict[str, float]:
    if isinstance(full_scale, Mapping):
        missing = [c for c in channels if c not in full_scale]
        if missing:
            raise ValueError(f"full_scale: no range given for {', '.join(missing)}")
        ranges = {c: full_scale[c] for c in channels}
    else:
        ranges = {c: full_scale for c in channels}
    for c, fs in ranges.items():
        if isinstance(fs, bool) or not isinstance(fs, (int, float)) or not (math.isfinite(fs) and fs > 0):
            raise ValueError(f"full_scale: expected a positive range in V for {c}, got {fs!r}")
    return {c: float(fs) for c, fs in ranges.items()}
