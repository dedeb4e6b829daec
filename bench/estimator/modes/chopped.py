"""Chopped mode: a modulated pump, ln R from each off/on/off triple of half-periods.

The pump-on part of each half-period is used from `EstimatorParams.rise_settle` (at the
``pump_power`` setting) after its edge and the pump-off part from `EstimatorParams.off_settle`;
a pump-on part whose mean pump-monitor reading differs from the previous one's (a soft-start
ramp) is not used. The settled part of each half-period gives a mean ``S``; each off/on/off
triple gives ``ln R = ln(S_on / S_off)`` with ``S_off`` the two neighbouring off levels
interpolated linearly to the time of the on level (for a 50 % duty cycle: their mean). This
cancels a linear drift of the transmission. The small residual of the gain decay left in an off
level, ``A exp(-t / tau)`` (below 1e-5 of ln R with the default off settle), is corrected with
the nominal tau, the edge taken half a sample before the first off sample; what that leaves
unknown (the edge anywhere in its sample interval, tau to ``u_tau``) is a systematic part of
ln R.

Cumulative: mean over cycles; its noise counts the off level that neighbouring cycles share
(`_chopped_noise`) and the dark's standard error (`bench.estimator.figures.dark_noise`). The
stored baseline is not needed; if present, it is compared with the pump-off level
(``baseline_stale``, also when it differs by more than ``baseline_drift_k`` sigma). A window
estimate holds the cycles that finished inside it: one per cycle when the modulation period is
a window or longer, a few estimates per second rather than thousands at fast chopping.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, NamedTuple

import numpy as np

from bench.estimator import timing
from bench.estimator.figures import (
    common_flags,
    dark_noise,
    figures,
    snr_flags,
    wavelength_of,
    with_ln_ratio_systematic,
)
from bench.estimator.heating import corrected_ln_ratio
from bench.estimator.mode import Mode, Skipped, Timing
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Clock, Counts, EstimatorState, Frame
from bench.estimator.stats import ScalarStats, level, pump_level_steady, residual_mean
from bench.records import Estimate, Quantity

__all__ = ["MODE", "TIMING", "ChoppedCore", "Segment", "Cycle", "OffLevel"]


@dataclass(frozen=True)
class Segment:
    """A stretch between pump edges: its settled part's mean S and where it sits."""

    start: int
    end: int  # last index
    on: bool
    n: float  # settled samples
    mean: float
    centre: float  # mean index of the settled samples
    residual: float  # mean exp(-t/tau) over the settled samples (t since the edge), off parts
    after_edge: bool  # starts at a real pump edge (not a stream start, gap or step)
    monitor: float = math.nan  # mean pump monitor over the settled samples
    steady: bool = True  # on parts: the pump level matches the previous on part's (no ramp)


@dataclass(frozen=True)
class ChoppedCore:
    open_start: int = -1
    open_on: bool = False
    open_after_edge: bool = False
    open_n: float = 0.0
    open_sum: float = 0.0
    open_isum: float = 0.0
    open_msum: float = 0.0
    open_m2sum: float = 0.0
    last_on_monitor: tuple[float, float] = (
        math.nan,
        0.0,
    )  # last finished on segment: monitor mean, its variance
    recent: tuple[Segment, ...] = ()  # the last two finished segments
    win: ScalarStats = ScalarStats()
    cum: ScalarStats = ScalarStats()
    win_off: ScalarStats = ScalarStats()
    cum_off: ScalarStats = ScalarStats()
    off_dsum: float = 0.0  # sum over cycles of d = ln S_off after - ln S_off before
    off_dsq: float = 0.0  # sum of d^2
    off_dn: int = 0
    warm: bool = False  # a cycle at a steady pump level has been seen since the stream (re)started
    frac_sum: float = 0.0  # sum over cycles of the interpolation weight f of the later off level
    win_corr: float = 0.0  # sum over cycles of the residual-decay correction applied (ln R)
    cum_corr: float = 0.0
    ref_sum: float = 0.0  # dark-corrected reference volts, summed over samples
    ref_n: int = 0


class OffLevel(NamedTuple):
    """A finished pump-off part with settled samples (for the pump-off level)."""

    end: int
    segment: Segment


class Cycle(NamedTuple):
    """One off/on/off cycle: ln R, its samples, the residual-decay correction applied to ln R,
    the interpolation weight of the later off level and the difference of the two ln off levels
    (nan for a first on/off pair)."""

    end: int
    ln_ratio: float
    n: float
    correction: float
    frac: float
    d_off: float


def ingest(state: EstimatorState, core: ChoppedCore, f: Frame, clock: Clock) -> tuple[ChoppedCore, list]:
    p = state.params
    seg = np.cumsum(f.change)
    nseg = int(seg[-1]) + 1
    w = f.settled
    if nseg == 1:
        cnt = np.array([float(np.count_nonzero(w))])
        sm = np.array([float(np.sum(f.s, where=w))])
        isum = np.array([float(np.sum(np.arange(f.i0, f.i0 + f.n, dtype=np.float64), where=w))])
        msum = np.array([float(np.sum(f.monitor, where=w))])
        m2sum = np.array([float(np.sum(f.monitor * f.monitor, where=w))])
    else:
        cnt = np.bincount(seg, weights=w, minlength=nseg)
        sm = np.bincount(seg, weights=np.where(w, f.s, 0.0), minlength=nseg)
        isum = np.bincount(
            seg, weights=np.where(w, np.arange(f.i0, f.i0 + f.n, dtype=np.float64), 0.0), minlength=nseg
        )
        msum = np.bincount(seg, weights=np.where(w, f.monitor, 0.0), minlength=nseg)
        m2sum = np.bincount(seg, weights=np.where(w, f.monitor * f.monitor, 0.0), minlength=nseg)
    starts = [f.i0] + [f.i0 + int(e) for e in f.edges]
    ons = [bool(f.on[0])] + [bool(f.on[e]) for e in f.edges]
    after = [False] + [True] * int(f.edges.size)
    continuing = core.open_start >= 0 and not f.start_is_edge
    if continuing:
        starts[0] = core.open_start
        ons[0] = core.open_on
        after[0] = core.open_after_edge
        cnt[0] += core.open_n
        sm[0] += core.open_sum
        isum[0] += core.open_isum
        msum[0] += core.open_msum
        m2sum[0] += core.open_m2sum
    items: list = []
    settle_n = int(math.ceil(p.off_settle() / clock.dt - 1e-9))
    recent = list(core.recent)
    if core.open_start >= 0 and not continuing:
        recent = []  # the stream restarted: no triple across it
    finished: list[Segment] = []
    last_on = core.last_on_monitor if continuing else (math.nan, 0.0)
    warm = core.warm and continuing
    for j in range(nseg - 1):
        if j == 0 and f.edges.size and f.edges[0] == 0 and not continuing:
            continue  # the block starts with an edge and there is no open segment: nothing here
        start = starts[j]
        end = starts[j + 1] - 1
        n_j = float(cnt[j])
        mean = float(sm[j] / n_j) if n_j > 0 else math.nan
        centre = float(isum[j] / n_j) if n_j > 0 else math.nan
        res = residual_mean(settle_n, n_j, clock.dt, p.tau) if (after[j] and not ons[j]) else 0.0
        mon = level(n_j, float(msum[j]), float(m2sum[j]))
        steady = True
        if ons[j] and n_j > 0:
            steady, last_on = pump_level_steady(mon, last_on, after[j]), mon
        finished.append(Segment(start, end, ons[j], n_j, mean, centre, res, after[j], mon[0], steady))
    last = nseg - 1
    new_core = dataclasses.replace(
        core,
        open_start=starts[last],
        open_on=ons[last],
        open_after_edge=after[last],
        open_n=float(cnt[last]),
        open_sum=float(sm[last]),
        open_isum=float(isum[last]),
        open_msum=float(msum[last]),
        open_m2sum=float(m2sum[last]),
        last_on_monitor=last_on,
    )
    for sgm in finished:
        if not sgm.on and sgm.n > 0:
            items.append(OffLevel(sgm.end, sgm))
        recent.append(sgm)
        if len(recent) > 3:
            recent.pop(0)
        cyc = _cycle(
            recent, sgm.end, first_pair=len(recent) == 2 and not recent[0].after_edge and recent[0].on
        )
        if cyc is not None and not recent[-2].steady:
            cyc = None  # the pump was still ramping up (a soft start): not a settled cycle
        if cyc is not None:
            items.append(cyc)
            warm = True
        elif len(recent) >= 2 and recent[-2].on and not sgm.on:
            # before the first steady cycle the pump is still coming up: expected, not a fault
            items.append(Skipped(sgm.end, "skip" if warm else "warmup"))
    new_core = dataclasses.replace(
        new_core,
        recent=tuple(recent[-2:]),
        ref_sum=core.ref_sum + f.ref_sum,
        ref_n=core.ref_n + f.n,
        warm=warm,
    )
    return new_core, items


def _cycle(recent: list[Segment], end: int, first_pair: bool) -> Cycle | None:
    """The `Cycle` of the on segment in the middle of the last three finished segments (or of
    a first on/off pair), ending at sample ``end``, or None."""
    if first_pair:
        on, off_a = recent[-2], recent[-1]
        if not (on.on and not off_a.on and on.n > 0 and off_a.n > 0):
            return None
        if not (on.mean > 0 and off_a.mean > 0):
            return None
        a = math.log(on.mean / off_a.mean)
        s_off = off_a.mean * math.exp(-a * off_a.residual)
        x = math.log(on.mean / s_off)
        return Cycle(end, x, on.n + off_a.n, x - a, 1.0, math.nan)
    if len(recent) < 3:
        return None
    off_b, on, off_a = recent[-3], recent[-2], recent[-1]
    if off_b.on or not on.on or off_a.on or min(off_b.n, on.n, off_a.n) <= 0:
        return None
    if not (on.mean > 0 and off_b.mean > 0 and off_a.mean > 0):
        return None
    frac = (on.centre - off_b.centre) / (off_a.centre - off_b.centre)
    s_off = off_b.mean + (off_a.mean - off_b.mean) * frac
    a = math.log(on.mean / s_off)  # first pass, for the residual-decay correction
    sb = off_b.mean * math.exp(-a * off_b.residual)
    sa = off_a.mean * math.exp(-a * off_a.residual)
    s_off = sb + (sa - sb) * frac
    x = math.log(on.mean / s_off)
    return Cycle(end, x, off_b.n + on.n + off_a.n, x - a, frac, math.log(sa / sb))


def add(core: ChoppedCore, item: Cycle | OffLevel) -> ChoppedCore:
    if isinstance(item, Cycle):
        x, n, corr, frac, d = item.ln_ratio, item.n, item.correction, item.frac, item.d_off
        ds, dsq, dn = core.off_dsum, core.off_dsq, core.off_dn
        if math.isfinite(d):
            ds, dsq, dn = ds + d, dsq + d * d, dn + 1
        return dataclasses.replace(
            core,
            win=core.win.add(x, n),
            cum=core.cum.add(x, n),
            frac_sum=core.frac_sum + frac,
            win_corr=core.win_corr + corr,
            cum_corr=core.cum_corr + corr,
            off_dsum=ds,
            off_dsq=dsq,
            off_dn=dn,
        )
    if isinstance(item, OffLevel):
        # the pump-off level, less the residual of the last gain decay (ln R from the cycles so far)
        a = core.cum.mean() if core.cum.k else 0.0
        seg = item.segment
        m = seg.mean * math.exp(-a * seg.residual)
        return dataclasses.replace(
            core, win_off=core.win_off.add(m, seg.n), cum_off=core.cum_off.add(m, seg.n)
        )
    return core


def _chopped_noise(core: ChoppedCore, stats: ScalarStats) -> float:
    """Noise sigma of the mean ln R of the cycles in ``stats`` (nan if it cannot be told).

    Neighbouring cycles share the off level between them, so their ln R values are correlated
    at lag one, ``gamma_1 = f (1 - f) var(ln S_off)`` (``f`` the interpolation weight of the
    later off level, 1/2 at a 50 % duty cycle), and at no other lag: the exact variance of the
    mean of ``k`` cycles is ``(gamma_0 + 2 gamma_1 (k - 1) / k) / k``, which with the sample
    variance ``s^2`` (whose expectation is ``gamma_0 - 2 gamma_1 / k``) is
    ``(s^2 + 2 gamma_1) / k``: the variance of the mean of correlated data in terms of its
    autocovariances, with which Flyvbjerg and Petersen start their blocking analysis [1]_,
    here exact because the covariance is known to stop at lag one. ``var(ln S_off)`` is half
    the mean squared difference of the two off levels around each cycle, less their mean (a
    linear drift moves every difference alike) [2]_. A window of one or two cycles takes the
    scatter of all cycles so far.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
       J. Chem. Phys. 91, 461 (1989).
    .. [2] J. von Neumann, R. H. Kent, H. R. Bellinson and B. I. Hart, "The mean square
       successive difference", Ann. Math. Statist. 12, 153 (1941).
    """
    k = stats.k
    cum = core.cum
    if cum.k == 0 or k == 0:
        return math.nan
    f = core.frac_sum / cum.k
    n = core.off_dn
    v_off = 0.5 * max(core.off_dsq / n - (core.off_dsum / n) ** 2, 0.0) * n / (n - 1) if n >= 2 else 0.0
    gamma1 = f * (1.0 - f) * v_off
    if k >= 3:
        s2 = stats.std() ** 2
    elif cum.k >= 3:
        s2 = cum.std() ** 2
    else:
        return math.nan
    return math.sqrt(max(s2 + 2.0 * gamma1, 0.0) / k)


def estimate(state: EstimatorState, core: ChoppedCore, scope: str, t: float, counts: Counts) -> Estimate:
    p = state.params
    stats = core.win if scope == "window" else core.cum
    off = core.win_off if scope == "window" else core.cum_off
    wl = wavelength_of(state)
    flags = common_flags(state, t, counts, wl, uses_baseline=False)
    extra: dict[str, Any] = {"n_cycles": stats.k, "n_off_levels": off.k}
    values: dict[str, Quantity] = {}
    if counts.skipped:
        flags.add("not_settled")
    if stats.k == 0:
        flags.add("not_settled")
    else:
        lnr = stats.mean()
        sn = _chopped_noise(core, stats)
        if math.isfinite(sn):
            ref = core.ref_sum / core.ref_n if core.ref_n else math.nan
            s_off = core.cum_off.mean() if core.cum_off.k else math.nan
            sn = math.hypot(sn, dark_noise(state.dark, ref, s_off, lnr))
            # a sample the (modulated) pump warms in both half-periods (`bench.estimator.heating`)
            lnr, t_noise, t_sys, t_extra, t_flags = corrected_ln_ratio(
                p, state.temperatures, lnr, 0.0, both_warm=True
            )
            sn = math.hypot(sn, t_noise)
            extra.update(t_extra)
            flags |= t_flags
            values = with_ln_ratio_systematic(figures(p, lnr, sn, wl), t_sys)
            # the residual-decay correction of the off levels: the edge lies somewhere in its
            # sample interval (uniform) and tau is known to u_tau
            corr = abs((core.win_corr if scope == "window" else core.cum_corr) / stats.k)
            t0 = p.off_settle() / p.tau
            dt = state.clock.dt
            rel = math.hypot(dt / p.tau / math.sqrt(12.0), (t0 + 1.0) * p.u_tau)
            values = with_ln_ratio_systematic(values, corr * rel)
            flags |= snr_flags(values, p, stats.k if scope == "cumulative" else core.cum.k)
        else:
            flags.add("low_snr")
            extra["ln_ratio_unweighted"] = lnr
    b = state.baseline
    if b is not None and off.k >= 2:
        drift_sigma = math.hypot(off.error(), b.sigma)
        extra["s_off"] = off.mean()
        extra["baseline_drift_sigmas"] = (off.mean() - b.value) / drift_sigma if drift_sigma > 0 else math.inf
        if abs(off.mean() - b.value) > p.baseline_drift_k * drift_sigma:
            flags.add("baseline_stale")
    if b is not None and t - b.t > p.baseline_max_age:
        flags.add("baseline_stale")
    return Estimate(
        t=t,
        mode=state.mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flags),
        n_samples=int(stats.n_samples),
        extra=MappingProxyType(extra),
    )


def reset_window(core: ChoppedCore) -> ChoppedCore:
    return dataclasses.replace(core, win=ScalarStats(), win_off=ScalarStats(), win_corr=0.0)


def step_figure(state: EstimatorState, core: ChoppedCore) -> tuple[float, float, int, float] | None:
    """(ln R, noise sigma, cycles, samples) of a sweep step measured as in chopped mode, or None."""
    stats = core.cum
    if stats.k < 3:
        return None
    return stats.mean(), _chopped_noise(core, stats), stats.k, stats.n_samples


def _settle(params: EstimatorParams, settings: Mapping[str, Any]) -> tuple[float, float]:
    return params.rise_settle(settings.get("pump_power")), params.off_settle()


# -- timing: each half-period holds SETTLE_SHARE settle windows by default ----------------------


def _half_periods(params: EstimatorParams, pump_power: float | None) -> tuple[float, float]:
    return params.rise_settle(pump_power), params.off_settle()


def _default_half(params: EstimatorParams, pump_power: float | None, rise: float, off: float) -> float:
    return timing.SETTLE_SHARE * max(rise, off)


def _refusal(
    params: EstimatorParams, period: float, pump_power: float | None, rise: float, off: float
) -> str | None:
    half = 0.5 * period
    if half > rise and half > off:
        return None
    power = "no pump power" if not pump_power else f"{pump_power:.3g} W of pump"
    ms = 1e3
    return (
        f"chopped mode: a pump period of {period * ms:.4g} ms has half-periods of {half * ms:.4g} ms, "
        f"but the pump-on part is used only from {rise * ms:.3g} ms after its edge ({power}) and the "
        f"pump-off part from {off * ms:.3g} ms after its edge: no settled data. It needs a period above "
        f"{2 * max(rise, off) * ms:.3g} ms; the default is "
        f"{timing.default_period(params, 'chopped', pump_power) * ms:.4g} ms"
    )


TIMING = Timing(half_periods=_half_periods, default_half=_default_half, refusal=_refusal)

MODE = Mode(
    name="chopped",
    new_core=lambda params, settings, clock: ChoppedCore(),
    ingest=ingest,
    add=add,
    reset_window=reset_window,
    estimate=estimate,
    flush=lambda state: state,
    settle=_settle,
    pump_steady=lambda settings: False,
    words="chopped: modulated pump, off/on/off ratios",
    cli_words="chopped: modulated pump",
    describe="chopped, period {chop_ms:g} ms",
    timing=TIMING,
    period="chop",
    step_figure=step_figure,
)
