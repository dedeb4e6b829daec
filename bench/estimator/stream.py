"""The estimator's stream: blocks of detector samples in, gain and inversion estimates out.

Streaming in the state-in/state-out style of ``scipy.signal.sosfilt``: `update` is a pure
function of ``(state, block)`` returning ``(new_state, estimates)``; states are frozen and never
changed in place, so replaying a stored run gives exactly the live figures. No I/O happens here.
What differs between modes is asked of the state's `bench.estimator.mode.Mode` record (the
table `bench.estimator.mode.MODES`); nothing here names a mode.

Emission. Time is cut into windows of ``window`` seconds on the sample-index grid. When the
first sample after a window has been processed, the estimator emits that window's estimate
(scope ``"window"``) and the cumulative estimate as of the window's end (scope
``"cumulative"``: everything since the mode, the dark or a setting last changed). A window
estimate holds the items (batches, cycles, decays ...) that finished inside the window. Windows
that saw no samples (a gap) emit nothing. `report` gives the cumulative estimate of everything
so far.

Gaps. A block that starts later than the previous one ended (lost samples) restarts the
settle time, as a pump edge would, and ends the open segment or decay without using it.

Determinism. The batch, segment, decay and window grids are fixed by the sample index, so
feeding the same samples in blocks of any size gives the same estimates, equal to rounding
(about 1e-12 relative; the tests require 1e-9): in every mode, for every emitted estimate and
for `report`. Only the order of floating-point additions within one batch or bin can differ.
Fitted figures (decay, sweep fits) inherit that agreement as long as the fit converges to a
well-defined optimum (tolerances 1e-12); a saturation model far from the points amplifies
rounding to about 1e-8. Setting changes must arrive at the same sample positions (between the
same two samples), as they do on replay.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from types import MappingProxyType
from typing import Any

import numpy as np

from bench.estimator import heating
from bench.estimator.capture import Background, Baseline, Dark
from bench.estimator.mode import EMISSION_SETTINGS, MODES, Skipped, mode_of
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Counts, EstimatorState, Frame, make_frame
from bench.records import PROBE, PUMP_SETPOINT, SAMPLE_TEMP, WAVELENGTH, Block, Estimate

__all__ = ["SETTINGS", "new_state", "with_dark", "with_baseline", "with_setting", "update", "report"]

#: Settings a state may carry: pump power (W) or current (A), probe wavelength (m), and for
#: sweeps the way each step is measured (``"watch"`` or ``"chopped"``).
SETTINGS = ("pump_power", "pump_current", "probe_wavelength", "method")


def _check_settings(settings: Mapping[str, Any] | None, mode: str) -> dict[str, Any]:
    out: dict[str, Any] = {}
    own = tuple(k for k in mode_of(mode).settings if k not in SETTINGS)
    for key, value in (settings or {}).items():
        if key not in SETTINGS + own:
            raise ValueError(f"settings: unknown setting {key!r} (known: {', '.join(SETTINGS + own)})")
        if key == "method":  # the mode each step is measured as: one with a step figure
            steps = [name for name, m in MODES.items() if m.step_figure is not None]
            if value not in steps:
                raise ValueError(f"settings: method must be {' or '.join(map(repr, steps))}, got {value!r}")
            if key not in mode_of(mode).settings:
                takers = [name for name, m in MODES.items() if key in m.settings]
                raise ValueError(f"settings: {key} applies to {' and '.join(takers)} mode only")
        elif value is not None:
            if (
                isinstance(value, bool)
                or not isinstance(value, (int, float))
                or not math.isfinite(value)
                or value < 0
            ):
                raise ValueError(f"settings: {key} must be a finite number, zero or positive, got {value!r}")
            if key == "probe_wavelength" and value <= 0:
                raise ValueError(f"settings: probe_wavelength must be positive, got {value!r}")
            value = float(value)
        out[key] = value
    return out


def new_state(
    params: EstimatorParams, mode: str, settings: Mapping[str, Any] | None = None
) -> EstimatorState:
    """A fresh estimator for ``mode`` (one of `MODES`) with optional `SETTINGS`."""
    if not isinstance(params, EstimatorParams):
        raise ValueError(f"params: expected EstimatorParams, got {type(params).__name__}")
    m = mode_of(mode)
    s = _check_settings(settings, mode)
    return EstimatorState(
        params=params, mode=mode, settings=MappingProxyType(s), core=m.new_core(params, s, None)
    )


def _restart(state: EstimatorState, *, settle: bool = True, **changes: Any) -> EstimatorState:
    """Same stream, fresh accumulators (a new 'cumulative' scope) from the next sample on.

    With ``settle`` the next sample also starts a step: ``step_settle_time`` passes before
    samples count again (a setting changed on the bench)."""
    st = dataclasses.replace(state, **changes)
    pump = dataclasses.replace(st.pump, step_pending=True) if settle else st.pump
    m = mode_of(st.mode)
    core = m.restart(st) if m.restart is not None else m.new_core(st.params, st.settings, st.clock)
    return dataclasses.replace(
        st,
        pump=pump,
        core=core,
        win_counts=Counts(),
        cum_counts=Counts(),
        temperatures=heating.restart_scope(st.temperatures, _next_sample_time(st)),
    )


def _next_sample_time(state: EstimatorState) -> float:
    """Run-clock time of the next detector sample (-inf before the first)."""
    c = state.clock
    return -math.inf if c is None else c.origin + c.next_index * c.dt


def with_dark(state: EstimatorState, dark: Dark | None) -> EstimatorState:
    """Use ``dark`` from now on. The accumulators restart (S means something else now)."""
    if dark is not None and not isinstance(dark, Dark):
        raise ValueError(f"dark: expected Dark, got {type(dark).__name__}")
    return _restart(mode_of(state.mode).close_step(state), settle=False, dark=dark)


def with_baseline(state: EstimatorState, baseline: Baseline | None) -> EstimatorState:
    """Use ``baseline`` for estimates from now on (watch estimates use it when emitted)."""
    if baseline is not None and not isinstance(baseline, Baseline):
        raise ValueError(f"baseline: expected Baseline, got {type(baseline).__name__}")
    temps = state.temperatures
    if baseline is not None:
        temps = heating.at_baseline(temps, baseline.t_start, baseline.t)
    return dataclasses.replace(state, baseline=baseline, temperatures=temps)


def with_background(
    state: EstimatorState, background: Background | None, *, t_resume: float | None = None
) -> EstimatorState:
    """Subtract ``background`` from the probe on pump-on samples from now on. The accumulators
    restart (S means something else now), as for a new dark.

    ``t_resume`` (run clock, s) is when the probe was unblocked after the measurement: samples
    count again ``step_settle_time`` after it, so none taken with the probe blocked (S
    meaningless) reaches an estimate however the samples are cut into blocks."""
    if background is not None and not isinstance(background, Background):
        raise ValueError(f"background: expected Background, got {type(background).__name__}")
    if t_resume is not None and not (isinstance(t_resume, (int, float)) and math.isfinite(t_resume)):
        raise ValueError(f"t_resume: must be a finite time in s or None, got {t_resume!r}")
    st = _restart(mode_of(state.mode).close_step(state), settle=t_resume is not None, background=background)
    if t_resume is None:
        return st
    return dataclasses.replace(st, pump=dataclasses.replace(st.pump, step_time=float(t_resume)))


def with_setting(state: EstimatorState, *, t: float | None = None, **settings: Any) -> EstimatorState:
    """Announce a setting change (pump power or current, probe wavelength).

    A change starts a new cumulative scope from the next sample, with ``step_settle_time``
    before samples count again; in sweep mode it also closes the current step and adds its
    point. Settings equal to the current ones change nothing.

    ``t`` (run clock, s) is when the setting changed on the bench, if known: the step's
    ``step_settle_time`` then runs from ``t`` when that is later than the next sample (a
    setting applied before the block that holds ``t``), so where the new step starts does not
    depend on how the samples are cut into blocks.
    """
    if t is not None and not (isinstance(t, (int, float)) and math.isfinite(t)):
        raise ValueError(f"t: must be a finite time in s or None, got {t!r}")
    new = _check_settings(settings, state.mode)
    if "method" in new:
        raise ValueError("settings: method can only be given to new_state")
    merged = dict(state.settings)
    merged.update(new)
    if "pump_current" in new and "pump_power" not in new and new["pump_current"] is not None:
        merged["pump_power"] = state.params.pump_power_at(new["pump_current"])
    if merged == dict(state.settings):
        return state
    if set(new) <= set(EMISSION_SETTINGS):  # the pump's edges settle as edges do, no new scope
        return dataclasses.replace(state, settings=MappingProxyType(merged))
    st = _restart(mode_of(state.mode).close_step(state), settings=MappingProxyType(merged))
    return dataclasses.replace(
        st, pump=dataclasses.replace(st.pump, step_time=None if t is None else float(t))
    )


def _item_counts(items: list) -> tuple[int, int]:
    skipped = sum(1 for it in items if isinstance(it, Skipped) and it.counts_as_skipped)
    no_ref = sum(1 for it in items if isinstance(it, Skipped) and it.reason == "no_reference")
    return skipped, no_ref


def _sample_counts(f: Frame, W: int, w_first: int, w_last: int, watch_like: bool) -> list[Counts]:
    """Per window w_first..w_last: samples seen, unsettled pump-on samples (counted with a steady
    pump only, ``watch_like``), near-full-scale samples."""
    out = []
    lo, hi = f.i0, f.i0 + f.n
    unsettled = None
    if watch_like:
        mask = f.on & ~f.settled
        if mask.any():
            unsettled = np.bincount(
                (np.flatnonzero(mask) + f.i0) // W - w_first, minlength=w_last - w_first + 1
            )
    over = None
    if f.over is not None:
        over = np.bincount((np.flatnonzero(f.over) + f.i0) // W - w_first, minlength=w_last - w_first + 1)
    for k, w in enumerate(range(w_first, w_last + 1)):
        seen = min(hi, (w + 1) * W) - max(lo, w * W)
        out.append(
            Counts(
                seen=int(seen),
                unsettled=int(unsettled[k]) if unsettled is not None else 0,
                over=int(over[k]) if over is not None else 0,
            )
        )
    return out


# ============================================================================================
# update
# ============================================================================================


def update(state: EstimatorState, block: Block) -> tuple[EstimatorState, list[Estimate]]:
    """Feed one block; returns the new state and the estimates completed by it.

    Detector blocks need ``probe``, ``reference`` and ``pump_monitor`` channels. A block
    without a ``probe`` channel but with ``pump_setpoint`` (A) or ``probe_wavelength`` (m)
    announces a setting (as `with_setting`); any other block is ignored.
    """
    if not isinstance(state, EstimatorState):
        raise ValueError(f"state: expected EstimatorState, got {type(state).__name__}")
    if not isinstance(block, Block):
        raise ValueError(f"block: expected Block, got {type(block).__name__}")
    if PROBE not in block.channels:
        return _setting_block(state, block), []
    mode = mode_of(state.mode)
    if not mode.polled and (
        (state.clock is not None and state.clock.polled) or (state.clock is None and block.dt == 0)
    ):
        raise ValueError(
            f"block: block {block.seq} from {block.source} is a polled reading (dt = 0), and "
            f"{state.mode} mode needs sampled data; polled detectors work in "
            f"{', '.join(name for name, m in MODES.items() if m.polled)} mode"
        )
    if state.temperatures.pending_t.size:  # readings the data have now passed count
        state = dataclasses.replace(state, temperatures=heating.advance_to(state.temperatures, block.t0))
    frame, clock, pump = make_frame(state, block, mode)
    if frame is None:
        return state, []
    core = state.core
    if core is None:  # a core that needs the sample interval (decay bins)
        core = mode.new_core(state.params, state.settings, clock)
    st = dataclasses.replace(state, clock=clock, pump=pump, core=core)
    if state.clock is None:
        st = dataclasses.replace(st, window_id=0)
    core, items = mode.ingest(st, core, frame, clock)
    items.sort(key=lambda it: it.end)
    W = clock.window
    last = frame.i0 + frame.n - 1
    w_first = frame.i0 // W
    w_last = last // W
    per_window = _sample_counts(frame, W, w_first, w_last, mode.pump_steady(st.settings))
    estimates: list[Estimate] = []
    win_counts, cum_counts = st.win_counts, st.cum_counts
    window_id = st.window_id
    k = 0
    # windows that end inside this block are complete once their next sample is processed
    for w in range(window_id, last // W):
        end = (w + 1) * W
        chunk = []
        while k < len(items) and items[k].end < end:
            chunk.append(items[k])
            k += 1
        for it in chunk:
            if not isinstance(it, Skipped):
                core = mode.add(core, it)
        skipped, no_ref = _item_counts(chunk)
        wc = per_window[w - w_first] if w >= w_first else Counts()
        wc = dataclasses.replace(wc, skipped=skipped, no_reference=no_ref)
        win_counts = win_counts.plus(wc)
        cum_counts = cum_counts.plus(wc)
        if win_counts.seen:
            t_end = clock.time(end - 1)
            est_state = dataclasses.replace(st, core=core)
            estimates.append(mode.estimate(est_state, core, "window", t_end, win_counts))
            estimates.append(mode.estimate(est_state, core, "cumulative", t_end, cum_counts))
        core = mode.reset_window(core)
        win_counts = Counts()
    window_id = max(window_id, last // W)
    rest = items[k:]
    for it in rest:
        if not isinstance(it, Skipped):
            core = mode.add(core, it)
    skipped, no_ref = _item_counts(rest)
    tail = per_window[window_id - w_first] if window_id >= w_first else Counts()
    tail = dataclasses.replace(tail, skipped=skipped, no_reference=no_ref)
    win_counts = win_counts.plus(tail)
    cum_counts = cum_counts.plus(tail)
    st = dataclasses.replace(st, core=core, window_id=window_id, win_counts=win_counts, cum_counts=cum_counts)
    return st, estimates


def _setting_block(state: EstimatorState, block: Block) -> EstimatorState:
    if block.n == 0:
        return state
    if SAMPLE_TEMP in block.channels:
        state = dataclasses.replace(state, temperatures=heating.take_readings(state.temperatures, block))
    if PUMP_SETPOINT in block.channels:
        current = float(block.column(PUMP_SETPOINT)[-1])
        if state.settings.get("pump_current") != current:
            state = with_setting(state, pump_current=current)
    if WAVELENGTH in block.channels:
        lam = float(block.column(WAVELENGTH)[-1])
        if state.settings.get("probe_wavelength") != lam and lam > 0:
            state = with_setting(state, probe_wavelength=lam)
    return state


def report(state: EstimatorState) -> list[Estimate]:
    """The cumulative estimate of everything so far (the figure to report), as a one-item list.

    Counts the batch being filled (watch, sweep) and, in decay mode, an open decay that already
    covers the fit span; in sweep mode the current step is included among the points and fits.
    Pure: the state is not changed. Empty before the first detector block.
    """
    if not isinstance(state, EstimatorState):
        raise ValueError(f"state: expected EstimatorState, got {type(state).__name__}")
    if state.clock is None or state.core is None:
        return []
    t = state.clock.time(state.clock.next_index - 1)
    mode = mode_of(state.mode)
    st = mode.flush(state)
    return [mode.estimate(st, st.core, "cumulative", t, state.cum_counts)]
