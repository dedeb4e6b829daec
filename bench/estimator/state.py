"""The estimator's state record and the per-block preprocessing every mode shares.

`EstimatorState` is everything the estimator carries from block to block (frozen; the stream's
functions return new ones). `make_frame` turns one detector block into a `Frame`: the
normalised transmission ``S = (V_probe - dark_p) / (V_ref - dark_r)`` per sample, the pump
on/off state (``pump_monitor`` above `EstimatorParams.pump_threshold`), the pump edges (a change
of that state) and which samples have settled. Samples within the mode's settle time of a pump
edge (`bench.estimator.mode.Mode.settle`), within ``step_settle_time`` of a setting change, a gap
in the sample index or the first sample of the stream are not used.

The sample-index grid (`Clock`) fixes batches, segments, decays and windows, so that feeding the
same samples in blocks of any size gives the same estimates.

A polled stream (a meter: one-sample blocks, ``dt = 0``, each at its own time) has no sample
interval. Its grid is one of time: index i is ``origin + i * POLL_TICK``, and each reading
takes the index of its own time (rounded to `POLL_TICK`), so batches and windows are spans of
time and the settle times count time, with the real times of the readings and nothing made up
in between. A gap is a jump in the blocks' ``first_index`` (the reader numbers its requests: a
request without a reading leaves one out), not a jump in time.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from bench.estimator.capture import Background, Baseline, Dark
from bench.estimator.heating import Temperatures
from bench.estimator.params import EstimatorParams
from bench.records import PROBE, PUMP_MONITOR, REFERENCE, Block

__all__ = ["Clock", "Pump", "Counts", "EstimatorState", "Frame", "new_clock", "make_frame", "POLL_TICK"]

#: Time resolution (s) of the grid of a polled stream: one index per microsecond.
POLL_TICK = 1e-6


@dataclass(frozen=True)
class Clock:
    """The sample-index grid: index i is at ``origin + i * dt``."""

    origin: float
    dt: float
    batch: int  # samples per batch
    window: int  # samples per window (a whole number of batches)
    next_index: int  # first index not yet processed
    #: A polled stream: indices are `POLL_TICK` steps of time, each block one reading.
    polled: bool = False
    #: Polled: the request number (``first_index``) the next reading should have; -1 unknown.
    next_request: int = -1

    def time(self, index: float) -> float:
        return self.origin + index * self.dt


@dataclass(frozen=True)
class Pump:
    on: bool = False
    last_edge: int = 0  # first index after the last pump edge (or stream start, gap)
    last_step: int = -(2**62)  # first index after the last setting change
    step_pending: bool = False  # a setting changed: the next sample starts a step
    step_time: float | None = None  # ... at this run-clock time, if later than the next sample


@dataclass(frozen=True)
class Counts:
    """Samples seen, and flagged samples, in the open window and since the start."""

    seen: int = 0
    unsettled: int = 0
    over: int = 0
    skipped: int = 0  # cycles or decays left out (no settled part, too short, no reference)
    no_reference: int = 0

    def plus(self, other: Counts) -> Counts:
        return Counts(
            self.seen + other.seen,
            self.unsettled + other.unsettled,
            self.over + other.over,
            self.skipped + other.skipped,
            self.no_reference + other.no_reference,
        )


@dataclass(frozen=True, eq=False)
class EstimatorState:
    """Everything the estimator carries from block to block (frozen; see `update`)."""

    params: EstimatorParams
    mode: str
    settings: Mapping[str, Any]
    dark: Dark | None = None
    baseline: Baseline | None = None
    background: Background | None = None
    clock: Clock | None = None
    pump: Pump = Pump()
    core: Any = None
    window_id: int = 0
    win_counts: Counts = Counts()
    cum_counts: Counts = Counts()
    temperatures: Temperatures = Temperatures()


@dataclass(eq=False)
class Frame:
    i0: int
    n: int
    s: np.ndarray
    on: np.ndarray
    change: np.ndarray  # pump edge at this sample
    settled: np.ndarray
    edges: np.ndarray  # local indices of pump edges
    start_is_edge: bool  # sample 0 starts a segment (stream start, gap or step)
    over: np.ndarray | None  # samples near full scale (None: none in this block)
    ref_sum: float = 0.0  # sum of the dark-corrected reference volts (for the dark's share of sigma)
    monitor: np.ndarray | None = None  # the pump monitor volts
    extra: dict[str, np.ndarray] = dataclasses.field(default_factory=dict)  # the mode's `Mode.channels`


def new_clock(params: EstimatorParams, t0: float, dt: float) -> Clock:
    batch = max(1, int(round(params.window / params.batches_per_window / dt)))
    return Clock(origin=t0, dt=dt, batch=batch, window=batch * params.batches_per_window, next_index=0)


def make_frame(state: EstimatorState, block: Block, mode) -> tuple[Frame | None, Clock, Pump]:
    """One detector block as a `Frame`, with the clock and pump state after it (``mode``: the
    state's `bench.estimator.mode.Mode`, for its settle times). ValueError naming the block when
    it lacks a channel, has no sample interval or does not follow the samples already seen."""
    p = state.params
    needed = (PROBE, REFERENCE) + ((PUMP_MONITOR,) if mode.pump_on is None else ()) + tuple(mode.channels)
    for name in needed:
        if name not in block.channels:
            raise ValueError(
                f"block: block {block.seq} from {block.source} has no {name!r} channel "
                f"(has {', '.join(block.channels)})"
            )
    n = block.n
    clock = state.clock
    if n == 0:
        return None, clock, state.pump  # type: ignore[return-value]
    first = clock is None
    polled = clock.polled if clock is not None else block.dt == 0
    if polled:
        clock, i0, gap = _polled_position(p, clock, block)
        return _frame(state, block, mode, clock, i0, first, gap)
    dt = block.dt if block.dt > 0 else (clock.dt if clock is not None else 0.0)
    if not dt > 0:
        raise ValueError(f"block: block {block.seq} has no sample interval (dt = 0) and none is known yet")
    if first:
        clock = new_clock(p, block.t0, dt)
        i0 = 0
    else:
        if abs(dt - clock.dt) > 1e-6 * clock.dt:
            raise ValueError(
                f"block: block {block.seq} has dt = {dt!r} s but the stream has {clock.dt!r} s; "
                "start a new estimator state when the sample rate changes"
            )
        i0 = int(round((block.t0 - clock.origin) / clock.dt))
        if i0 < clock.next_index:
            raise ValueError(
                f"block: block {block.seq} starts at sample {i0} but samples up to "
                f"{clock.next_index - 1} were already processed (repeated or out of order)"
            )
    gap = (not first) and i0 > clock.next_index
    clock = dataclasses.replace(clock, next_index=i0 + n)
    return _frame(state, block, mode, clock, i0, first, gap)


def _polled_position(p: EstimatorParams, clock: Clock | None, block: Block) -> tuple[Clock, int, bool]:
    """Clock after a polled reading, its index on the time grid, and whether requests were lost."""
    if block.n != 1 or block.dt != 0:
        raise ValueError(
            f"block: block {block.seq} from {block.source} has {block.n} samples at dt = {block.dt!r} s, "
            "but this stream is polled: one reading (n = 1, dt = 0) per block"
        )
    if not math.isfinite(block.t0):
        raise ValueError(f"block: block {block.seq} has no finite time (t0 = {block.t0!r})")
    request = block.first_index
    if clock is None:
        clock = dataclasses.replace(new_clock(p, block.t0, POLL_TICK), polled=True)
        i0, gap = 0, False
    else:
        i0 = int(round((block.t0 - clock.origin) / POLL_TICK))
        if i0 < clock.next_index:
            raise ValueError(
                f"block: block {block.seq} at t = {block.t0!r} s is not after the reading before it "
                f"(t = {clock.time(clock.next_index - 1)!r} s): repeated or out of order"
            )
        gap = request >= 0 and clock.next_request >= 0 and request > clock.next_request
    nxt = request + 1 if request >= 0 else -1
    return dataclasses.replace(clock, next_index=i0 + 1, next_request=nxt), i0, gap


def background_volts(bg: Background, on: np.ndarray, vm: np.ndarray | None) -> np.ndarray:
    """The pump-induced background on each pump-on sample (V, 0 with the pump off): the level
    measured, scaled with the pump monitor where both it and the measurement's monitor level
    are known (first order: a fluorescence that saturates with the pump is exact only at the
    pump power it was measured at)."""
    level = np.where(on, bg.probe, 0.0)
    if vm is not None and math.isfinite(bg.pump_monitor_v) and bg.pump_monitor_v > 0:
        level = level * (vm / bg.pump_monitor_v)
    return level


def _frame(
    state: EstimatorState, block: Block, mode, clock: Clock, i0: int, first: bool, gap: bool
) -> tuple[Frame, Clock, Pump]:
    """The frame of ``block`` at index ``i0`` of ``clock`` (already advanced past it)."""
    p = state.params
    n = block.n
    vp = block.column(PROBE)
    vr = block.column(REFERENCE)
    vm = block.column(PUMP_MONITOR) if PUMP_MONITOR in block.channels else None
    if mode.pump_on is None:
        on = vm > p.pump_threshold(state.settings.get("pump_power"))
    else:
        on = np.asarray(mode.pump_on(block, p, state.settings), dtype=bool)
    if state.background is not None:
        vp = vp - background_volts(state.background, on, vm)
    with np.errstate(divide="ignore", invalid="ignore"):  # a blocked reference reads ~0 V: S is then inf/nan
        if state.dark is not None:
            s = (vp - state.dark.probe) / (vr - state.dark.reference)
        else:
            s = vp / vr

    pump = state.pump
    change = np.empty(n, dtype=bool)
    change[1:] = on[1:] != on[:-1]
    restart = first or gap
    if restart:
        change[0] = False
    else:
        change[0] = bool(on[0]) != pump.on
    edges = np.flatnonzero(change)
    last_edge = i0 if restart else pump.last_edge
    last_step = i0 if pump.step_pending else pump.last_step
    if pump.step_pending and pump.step_time is not None:
        last_step = max(i0, int(math.ceil((pump.step_time - clock.origin) / clock.dt - 1e-9)))
    step_n = int(math.ceil(p.step_settle_time / clock.dt - 1e-9))
    rise_s, off_s = mode.settle(p, state.settings)  # after a rising, a falling pump edge
    rise_n = int(math.ceil(rise_s / clock.dt - 1e-9))
    settle_n = int(math.ceil(off_s / clock.dt - 1e-9))
    local = np.arange(n)
    if edges.size == 0:
        settled = local >= (last_edge + (rise_n if on[0] else settle_n) - i0)
    else:
        marks = np.where(change, local, last_edge - i0)
        np.maximum.accumulate(marks, out=marks)
        since = local - marks
        settled = since >= (np.where(on, rise_n, settle_n) if rise_n != settle_n else settle_n)
    if last_step + step_n > i0:
        settled &= local >= (last_step + step_n - i0)

    over = None
    if p.detector_range is not None:
        lim = p.full_scale_fraction * p.detector_range
        if max(vp.max(), -vp.min(), vr.max(), -vr.min()) > lim:
            over = (np.abs(vp) > lim) | (np.abs(vr) > lim)

    new_pump = Pump(
        on=bool(on[-1]),
        last_edge=(i0 + int(edges[-1])) if edges.size else last_edge,
        last_step=last_step,
        step_pending=False,
    )
    ref = vr - state.dark.reference if state.dark is not None else vr
    frame = Frame(
        i0=i0,
        n=n,
        s=s,
        on=on,
        change=change,
        settled=settled,
        edges=edges,
        start_is_edge=restart or pump.step_pending,
        over=over,
        ref_sum=float(np.sum(ref)),
        monitor=vm,
        extra={name: block.column(name) for name in mode.channels},
    )
    return frame, clock, new_pump
