"""Trip conditions on the detector's blocks: near full scale, and a sudden transmission jump.

One section per condition: its pure check, its clear rule, its `Condition` record. The records
are listed in the one table, `bench.safety.conditions.CONDITIONS`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from bench.records import PROBE, PUMP_MONITOR, REFERENCE
from bench.safety.condition_record import (
    DETECTOR,
    DETECTOR_FEED,
    EVENT,
    UNJUDGED,
    BlockReading,
    Condition,
    Evidence,
    TripCondition,
    Verdict,
    cleared_by_acknowledgement,
    nothing_to_read,
)
from bench.safety.condition_record import as_samples as _array
from bench.safety.condition_record import first as _first
from bench.safety.condition_record import sample_times as _times

NEAR_FULL_SCALE = "near_full_scale"
TRANSMISSION_JUMP = "transmission_jump"

#: Detector channels checked against full scale.
DETECTOR_CHANNELS = (PROBE, REFERENCE, PUMP_MONITOR)


# --------------------------------------------------------------------------------------------
# A detector channel (probe, reference, pump_monitor) at or above full_scale_fraction of its range


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
            hits.append(
                (
                    float(t[i]),
                    (
                        f"{name} at {x:.4g} V, {share} of its {fs:g} V range (trips at "
                        f"{fraction * 100:.0f} %) at t={t[i]:.3f} s"
                    ),
                )
            )
    if not hits:
        return None
    seen_at, reason = min(hits)
    return TripCondition(NEAR_FULL_SCALE, reason, seen_at, DETECTOR)


def _full_scale_check(r: BlockReading) -> Verdict:
    columns = r.columns(DETECTOR_CHANNELS)
    if not columns:
        return UNJUDGED
    return check_full_scale(r.t, columns, r.ranges, r.cfg.full_scale_fraction)


def _full_scale_holds(e: Evidence) -> str | None:
    if not e.latest.peaks:
        return "no detector reading yet"
    for channel, (t, peak, fs) in e.latest.peaks.items():
        why = e.fresh(t, f"detector {channel}")
        if why:
            return why
        if not peak < e.cfg.full_scale_fraction * fs:
            return f"{channel} still reaches {peak:.4g} V of its {fs:g} V range"
    return None


FULL_SCALE_RECORD = Condition(
    NEAR_FULL_SCALE,
    DETECTOR_FEED,
    DETECTOR_CHANNELS,
    check=_full_scale_check,
    still_holds=_full_scale_holds,
    keys=("guard.full_scale_fraction",),
    summary=(
        "trips when a detector channel reaches full_scale_fraction of its range (or is not a number); "
        "clears on a fresh block of every channel below it"
    ),
)

# --------------------------------------------------------------------------------------------
# Optionally, a sudden relative change of the probe transmission S = probe / reference between
# consecutive short windows larger than transmission_jump while the pump did not change
# (parasitic lasing, or an optic that moved). Each window is compared with the one before and
# the one two before (`bench.safety.transmission_windows`), so a step that falls inside a window
# is still seen whole.


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


def _jump_check(r: BlockReading) -> Verdict:
    jump = r.cfg.transmission_jump
    if jump is None or not r.has(PROBE, REFERENCE):
        return UNJUDGED
    return r.monitor.windows.compare(
        r.block,
        r.t,
        r.columns(DETECTOR_CHANNELS),
        r.ranges,
        r.pump_steady,
        lambda *pairs: check_transmission_jump(*pairs, jump),
    )


JUMP_RECORD = Condition(
    TRANSMISSION_JUMP,
    DETECTOR_FEED,
    DETECTOR_CHANNELS,
    check=_jump_check,
    # A jump is an event, not a state: the person acknowledging confirms the optics were checked.
    still_holds=cleared_by_acknowledgement,
    keys=("guard.transmission_jump",),
    summary=(
        "trips when S changes by more than transmission_jump between short windows while the pump "
        "stays steady (off when the key is absent); cleared by acknowledging"
    ),
    kind=EVENT,
    holds_on_driver=nothing_to_read,
)
