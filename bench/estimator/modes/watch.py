"""Watch mode: a steady pump, ``S_off`` the stored baseline.

Samples are grouped into batches on a fixed grid of the sample index (``window /
batches_per_window`` long); the noise of the mean is the scatter of the batch means (batch
means: honest under noise correlated on time scales shorter than a batch, Flyvbjerg and
Petersen [1]_), never the per-sample standard deviation over sqrt(N). The driver switches the
pump on with a soft-start ramp, so a pump edge waits ``step_settle_time`` like a setting change.
``ln R = ln(S_on / S_off)``; the baseline's standard error is added in quadrature. A window
estimate holds the batches that finished inside it.

References
----------
.. [1] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
   J. Chem. Phys. 91, 461 (1989) (batch / blocking estimates of the error of a mean).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, NamedTuple

import numpy as np

from bench.estimator.figures import (
    BACKGROUND_FLAG_FRACTION,
    background_share,
    common_flags,
    figures,
    probe_terms,
    pump_induced,
    snr_flags,
    wavelength_of,
    with_ln_ratio_systematic,
)
from bench.estimator.heating import corrected_ln_ratio
from bench.estimator.mode import Mode
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Clock, Counts, EstimatorState, Frame
from bench.estimator.stats import BatchStats
from bench.records import Estimate, Quantity

__all__ = ["MODE", "WatchCore", "Batch"]


class Batch(NamedTuple):
    """One finished batch: its last sample index, settled pump-on samples and their mean S."""

    end: int
    n: float
    mean: float


@dataclass(frozen=True)
class WatchCore:
    open_id: int = -1  # batch being filled
    open_n: float = 0.0
    open_sum: float = 0.0
    win: BatchStats = BatchStats()
    cum: BatchStats = BatchStats()


def _ingest(state: EstimatorState, core: WatchCore, f: Frame, clock: Clock) -> tuple[WatchCore, list]:
    B = clock.batch
    valid = f.on & f.settled
    b_first = f.i0 // B
    b_last = (f.i0 + f.n - 1) // B
    nb = b_last - b_first + 1
    items: list = []
    open_id, open_n, open_sum = core.open_id, core.open_n, core.open_sum
    if open_id >= 0 and open_id != b_first:
        if open_n > 0:  # a gap ended the open batch
            items.append(Batch((open_id + 1) * B - 1, open_n, open_sum / open_n))
        open_id, open_n, open_sum = -1, 0.0, 0.0
    if nb == 1:
        cnt = np.array([float(np.count_nonzero(valid))])
        sm = np.array([float(np.sum(f.s, where=valid))])
    else:
        loc = (np.arange(f.i0, f.i0 + f.n) // B) - b_first
        cnt = np.bincount(loc, weights=valid, minlength=nb)
        sm = np.bincount(loc, weights=np.where(valid, f.s, 0.0), minlength=nb)
    if open_id == b_first:
        cnt[0] += open_n
        sm[0] += open_sum
    # batch j is finished when its last sample has been processed
    last = f.i0 + f.n - 1
    n_done = nb if (last + 1) % B == 0 else nb - 1
    for j in range(n_done):
        if cnt[j] > 0:
            items.append(Batch((b_first + j + 1) * B - 1, float(cnt[j]), float(sm[j] / cnt[j])))
    if n_done == nb:
        new = dataclasses.replace(core, open_id=-1, open_n=0.0, open_sum=0.0)
    else:
        new = dataclasses.replace(core, open_id=b_last, open_n=float(cnt[-1]), open_sum=float(sm[-1]))
    return new, items


def _add(core: WatchCore, item: Batch) -> WatchCore:
    n_b, m_b = item.n, item.mean
    return WatchCore(
        core.open_id, core.open_n, core.open_sum, win=core.win.add(n_b, m_b), cum=core.cum.add(n_b, m_b)
    )


def flush_core(core: WatchCore) -> WatchCore:
    """Count the open batch (for reports and step ends)."""
    if core.open_n > 0:
        m = core.open_sum / core.open_n
        core = dataclasses.replace(
            core,
            cum=core.cum.add(core.open_n, m),
            win=core.win.add(core.open_n, m),
            open_n=0.0,
            open_sum=0.0,
            open_id=-1,
        )
    return core


def estimate(state: EstimatorState, core: WatchCore, scope: str, t: float, counts: Counts) -> Estimate:
    stats = core.win if scope == "window" else core.cum
    wl = wavelength_of(state)
    flags = common_flags(state, t, counts, wl, uses_baseline=True)
    values: dict[str, Quantity] = {}
    s_on, e_on = stats.mean_error()
    extra: dict[str, Any] = {"n_batches": stats.k, "s_on": s_on, "s_on_sigma": e_on}
    if stats.k == 0 or (scope == "window" and counts.unsettled):
        flags.add("not_settled")
    if stats.k >= 2 and state.baseline is not None and s_on > 0:
        b = state.baseline
        lnr = math.log(s_on / b.value)
        bg_sigma, bg_fraction = background_share(state, s_on)
        sn = math.hypot(e_on / s_on, b.sigma / b.value, bg_sigma)
        # a sample the pump warms: ln R back at the baseline's temperature (`bench.estimator.heating`)
        n2_off = probe_terms(state.params, wl)[2] * state.params.n_total
        lnr, t_noise, t_sys, t_extra, t_flags = corrected_ln_ratio(
            state.params, state.temperatures, lnr, n2_off
        )
        sn = math.hypot(sn, t_noise)
        extra.update(t_extra)
        flags |= t_flags
        extra["s_off"] = b.value
        if state.background is not None:
            extra["background_v"] = state.background.probe
            extra["background_fraction"] = bg_fraction
            if bg_fraction > BACKGROUND_FLAG_FRACTION:
                flags.add("background_high")
        values = with_ln_ratio_systematic(figures(state.params, lnr, sn, wl), t_sys)
        extra.update(pump_induced(state.params, values, wl))
        flags |= snr_flags(values, state.params, stats.k)
    elif stats.k == 1:
        flags.add("low_snr")
    return Estimate(
        t=t,
        mode=state.mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flags),
        n_samples=int(stats.n),
        extra=MappingProxyType(extra),
    )


def _reset_window(core: WatchCore) -> WatchCore:
    return dataclasses.replace(core, win=BatchStats())


def _flush(state: EstimatorState) -> EstimatorState:
    return dataclasses.replace(state, core=flush_core(state.core))


def step_figure(state: EstimatorState, core: WatchCore) -> tuple[float, float, int, float] | None:
    """(ln R, noise sigma, batches, samples) of a sweep step measured as in watch mode, or None."""
    core = flush_core(core)
    stats = core.cum
    s_on, e_on = stats.mean_error()
    b = state.baseline
    if stats.k < 2 or b is None or not s_on > 0:
        return None
    return math.log(s_on / b.value), math.hypot(e_on / s_on, b.sigma / b.value), stats.k, stats.n


def _settle(params: EstimatorParams, settings: Mapping[str, Any]) -> tuple[float, float]:
    # the driver switches the pump on with a soft-start ramp: an edge counts as a step
    return params.step_settle_time, params.step_settle_time


MODE = Mode(
    name="watch",
    new_core=lambda params, settings, clock: WatchCore(),
    ingest=_ingest,
    add=_add,
    reset_window=_reset_window,
    estimate=estimate,
    flush=_flush,
    settle=_settle,
    pump_steady=lambda settings: True,
    words="watch: steady pump",
    cli_words="watch: steady pump",
    describe="watch, steady pump",
    step_figure=step_figure,
    polled=True,
)
