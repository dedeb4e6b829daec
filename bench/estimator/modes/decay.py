"""Decay mode: the gain decay after each pump-off edge, fitted for ln R(0) and the lifetime.

After each on->off edge, ``ln R(t) = ln(S(t) / S_off)`` with ``S_off`` the late tail of the same
decay or the stored baseline (`EstimatorParams.decay_reference`). The pump-on part is used from
`EstimatorParams.rise_settle` after its edge, the pump-off part from ``settle_time``. The edge
is taken half a sample before the first pump-off sample. Bins on the sample grid average
``ln S`` (a bin mean of ``S`` would bend the exponential), are averaged over decays and fitted
with ``ln R(0) exp(-t / tau)`` (`bench.physics.fitting.fit_exponential_decay`: weights from the
within-bin scatter or the counts, covariance scaled by the reduced chi-square). The gain still
left in a late tail, ``ln R(0) rho(tau)``, is put back iteratively; the reference's own noise is
propagated through the fit's sensitivity to an offset. ``ln R(0)`` is the settled pump-on level
before each decay less its ``S_off`` (`_decay_level`: no edge position needed); only when no on
part settles is it the fitted amplitude, whose unknown edge position within a sample interval
(uniform) is then a systematic part. The fitted decay time is corrected for the probe's own
stimulated rate to give ``tau_s`` (Koechner [1]_ sec. 1.4). A window estimate holds the decays
that finished inside it. A gap ends the open decay without using it.

References
----------
.. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
   (rate equations, the relaxation rate).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np

from bench.estimator import timing
from bench.estimator.figures import (
    common_flags,
    dark_noise,
    figures,
    probe_terms,
    quantity,
    wavelength_of,
    with_ln_ratio_systematic,
)
from bench.estimator.mode import Mode, Skipped, Timing
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Clock, Counts, EstimatorState, Frame
from bench.estimator.stats import ScalarStats, level, pump_level_steady, residual_mean
from bench.physics import fitting
from bench.records import Estimate, Quantity

__all__ = ["MODE", "TIMING", "DecayCore", "Decay"]


@dataclass(frozen=True, eq=False)
class CurveStats:
    """Sums over decays of binned ln R(t) curves (all arrays of length n_bins)."""

    n_decays: int
    count: np.ndarray  # samples per bin, summed over decays
    w_y: np.ndarray  # sum of count * ln R
    w_y2: np.ndarray  # sum of count * ln R^2 (kept for the spread between decays)
    ss: np.ndarray  # sum of within-bin squared deviations of ln S
    dof: np.ndarray  # sum of (count - 1)
    ref_var: float  # sum of the variances of each decay's own ln S_off (tails)
    ref_common: float  # variance of a ln S_off shared by all decays (stored baseline)
    n_samples: float
    tails: tuple[tuple[int, int], ...] = ()  # (tail samples, decays) of the decays that used a tail
    level: ScalarStats = ScalarStats()  # per decay: settled pump-on ln S before it less its ln S_off
    level_var: float = 0.0  # sum over those decays of the variance of each value (within-scatter)
    level_tails: tuple[tuple[int, int], ...] = ()  # as `tails`, for the decays in `level`
    level_ln_off: float = 0.0  # sum over those decays of their ln S_off

    @classmethod
    def empty(cls, n_bins: int) -> CurveStats:
        z = np.zeros(n_bins)
        return cls(0, z, z, z, z, z, 0.0, 0.0, 0.0)

    def add(self, d: Decay) -> CurveStats:
        c = d.count
        y = np.where(c > 0, d.ln_ratio, 0.0)
        tails = dict(self.tails)
        tails[d.tail_n] = tails.get(d.tail_n, 0) + 1
        level, level_var, level_tails = self.level, self.level_var, self.level_tails
        level_ln_off = self.level_ln_off
        if d.on_n > 0:
            level = level.add(d.on_level, d.on_n)
            level_ln_off += d.ln_off
            level_var += d.on_var + (0.0 if d.reference == "baseline" else d.ref_var)
            lt = dict(level_tails)
            lt[d.tail_n] = lt.get(d.tail_n, 0) + 1
            level_tails = tuple(sorted(lt.items()))
        return CurveStats(
            self.n_decays + 1,
            self.count + c,
            self.w_y + c * y,
            self.w_y2 + c * y * y,
            self.ss + d.ss,
            self.dof + np.maximum(c - 1.0, 0.0),
            self.ref_var + (0.0 if d.reference == "baseline" else d.ref_var),
            d.ref_var if d.reference == "baseline" else self.ref_common,
            self.n_samples + d.n_samples,
            tuple(sorted(tails.items())),
            level,
            level_var,
            level_tails,
            level_ln_off,
        )

    def tail_residual(self, tail0: int, dt: float, tau: float, of_levels: bool = False) -> float:
        """Mean over decays (those with an on level if ``of_levels``) of the gain left in the
        tail, as a fraction of ln R(0) (zero for decays referred to the stored baseline)."""
        tails, n = (self.level_tails, self.level.k) if of_levels else (self.tails, self.n_decays)
        if n == 0:
            return 0.0
        total = sum(k * residual_mean(tail0, m, dt, tau) for m, k in tails if m > 0)
        return total / n


@dataclass(frozen=True, eq=False)
class Decay:
    """One finished decay: binned ln R and what it rests on."""

    end: int  # index of its last sample
    count: np.ndarray
    ln_ratio: np.ndarray  # mean of ln(S / S_off) per bin
    ss: np.ndarray  # within-bin sum of squared deviations of ln S
    reference: str  # "tail" or "baseline"
    ref_var: float  # variance of ln S_off
    n_samples: float
    tail_n: int  # samples in the tail used as S_off (0 with the stored baseline)
    on_n: float = 0.0  # settled pump-on samples just before the edge
    on_level: float = math.nan  # their mean ln S less ln S_off
    on_var: float = 0.0  # variance of their mean ln S (within-scatter / n)
    ln_off: float = math.nan  # the ln S_off used


@dataclass(frozen=True, eq=False)
class DecayCore:
    n_bins: int
    bin_n: int
    open_edge: int = -1
    open_sums: np.ndarray | None = None  # shape (3, n_bins + 1): counts, sum S, sum S^2
    win: CurveStats | None = None
    cum: CurveStats | None = None
    cum_fit: Mapping[str, Any] | None = None  # cached fit of `cum`
    # settled samples of the open on part: n, sum ln S, sum ln S^2, sum monitor, sum monitor^2
    on_open: tuple[float, float, float, float, float] = (0.0, 0.0, 0.0, 0.0, 0.0)
    on_open_after_edge: bool = False  # the open on part started at a rising edge
    last_on_monitor: tuple[float, float] = (
        math.nan,
        0.0,
    )  # last finished on part: monitor mean, its variance
    on_levels: tuple[tuple[int, float, float, float], ...] = ()  # (edge, n, sum, sum sq) of open decays
    ref_sum: float = 0.0  # dark-corrected reference volts, summed over samples
    ref_n: int = 0


def ingest(state: EstimatorState, core: DecayCore, f: Frame, clock: Clock) -> tuple[DecayCore, list]:
    p = state.params
    nb, bn = core.n_bins, core.bin_n
    fit_n = nb * bn
    dt = clock.dt
    tail0 = int(math.ceil(p.decay_tail_start / dt))
    record_n = max(int(math.ceil(p.decay_record / dt)), fit_n, tail0 + 1)
    width = nb + 1
    off = ~f.on
    offedge = f.change & off
    off_local = np.flatnonzero(offedge)
    carry_edge = core.open_edge if not f.start_is_edge else -1
    # the settled pump-on level (mean ln S) before each on->off edge: ln R(0) of its decay
    seg = np.cumsum(f.change)
    nseg = int(seg[-1]) + 1
    with np.errstate(invalid="ignore", divide="ignore"):
        ls_all = np.log(f.s)
    won = f.on & f.settled & np.isfinite(ls_all)
    lsz = np.where(won, ls_all, 0.0)
    on_c = np.bincount(seg, weights=won.astype(np.float64), minlength=nseg)
    on_1 = np.bincount(seg, weights=lsz, minlength=nseg)
    on_2 = np.bincount(seg, weights=lsz * lsz, minlength=nseg)
    on_m = np.bincount(seg, weights=np.where(won, f.monitor, 0.0), minlength=nseg)
    on_mm = np.bincount(seg, weights=np.where(won, f.monitor * f.monitor, 0.0), minlength=nseg)
    after0 = False
    last_on = (math.nan, 0.0)
    if not f.start_is_edge:
        c0, a0, b0, m0, mm0 = core.on_open
        on_c[0] += c0
        on_1[0] += a0
        on_2[0] += b0
        on_m[0] += m0
        on_mm[0] += mm0
        after0 = core.on_open_after_edge
        last_on = core.last_on_monitor
    last = nseg - 1
    on_open = (
        (float(on_c[last]), float(on_1[last]), float(on_2[last]), float(on_m[last]), float(on_mm[last]))
        if f.on[-1]
        else (0.0, 0.0, 0.0, 0.0, 0.0)
    )
    levels = {} if f.start_is_edge else {e: (n_, a_, b_) for e, n_, a_, b_ in core.on_levels}
    for e in off_local:
        j = int(seg[e]) - 1
        if j >= 0 and on_c[j] > 0:
            mon = level(float(on_c[j]), float(on_m[j]), float(on_mm[j]))
            steady = pump_level_steady(mon, last_on, after0 if j == 0 else True)
            last_on = mon
            if steady:  # not while the pump still ramps up (soft start)
                levels[f.i0 + int(e)] = (float(on_c[j]), float(on_1[j]), float(on_2[j]))
    core = dataclasses.replace(
        core,
        on_open=on_open,
        on_open_after_edge=(last > 0) or after0,
        last_on_monitor=last_on,
        ref_sum=core.ref_sum + f.ref_sum,
        ref_n=core.ref_n + f.n,
    )
    if off_local.size == 0 and carry_edge < 0:
        return dataclasses.replace(core, open_edge=-1, open_sums=None, on_levels=()), []
    # the last on->off edge index for each sample (global), -1 if none known
    local = np.arange(f.n)
    if off_local.size:
        marks = np.where(offedge, local + f.i0, carry_edge)
        last_off = np.maximum.accumulate(marks)
    else:
        last_off = np.full(f.n, carry_edge)
    r = local + f.i0 - last_off
    sel = off & (last_off >= 0) & (r < record_n) & ((r < fit_n) | (r >= tail0))
    row = np.cumsum(offedge)  # 0: the carried decay
    n_rows = int(off_local.size) + 1
    idx = np.flatnonzero(sel)
    rr = r[idx]
    key = row[idx] * width + np.where(rr < fit_n, rr // bn, nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        sv = np.log(f.s[idx])  # bins average ln S: ln of a bin mean would bend the exponential
    finite = np.isfinite(sv)
    if not finite.all():
        key, sv = key[finite], sv[finite]
    size = n_rows * width
    sums = np.stack(
        [
            np.bincount(key, minlength=size).astype(np.float64),
            np.bincount(key, weights=sv, minlength=size),
            np.bincount(key, weights=sv * sv, minlength=size),
        ]
    ).reshape(3, n_rows, width)
    if carry_edge >= 0 and core.open_sums is not None:
        sums[:, 0, :] += core.open_sums
    row_edges = [carry_edge] + [f.i0 + int(e) for e in off_local]
    all_edges = f.i0 + f.edges
    last_index = f.i0 + f.n - 1
    items: list = []
    new_open_edge, new_open = -1, None
    for d, e in enumerate(row_edges):
        if e < 0:
            continue
        later = all_edges[all_edges > e]
        end = e + record_n
        if later.size:
            end = min(end, int(later[0]))
        if end - 1 <= last_index:
            items.append(
                _finish_decay(
                    state, core, e, end, sums[:, d, :], fit_n, tail0, dt, levels.get(e, (0.0, 0.0, 0.0))
                )
            )
        else:
            new_open_edge, new_open = e, sums[:, d, :].copy()
    kept = ((new_open_edge, *levels[new_open_edge]),) if new_open_edge in levels else ()
    return dataclasses.replace(core, open_edge=new_open_edge, open_sums=new_open, on_levels=kept), items


def _finish_decay(
    state: EstimatorState,
    core: DecayCore,
    edge: int,
    end: int,
    sums: np.ndarray,
    fit_n: int,
    tail0: int,
    dt: float,
    on_sums: tuple[float, float, float] = (0.0, 0.0, 0.0),
) -> Decay | Skipped:
    p = state.params
    nb = core.n_bins
    b = end - 1
    if end - edge < fit_n:
        return Skipped(b, "skip")
    c, s1, s2 = sums[0, :nb], sums[1, :nb], sums[2, :nb]
    good = c > 0
    mean = np.where(good, s1 / np.maximum(c, 1.0), 0.0)  # mean ln S per bin
    ss = np.where(good, np.maximum(s2 - s1 * mean, 0.0), 0.0)
    tc, t1, t2 = sums[0, nb], sums[1, nb], sums[2, nb]
    min_tail = int(math.ceil(p.decay_min_tail / dt))
    tail_ok = tc >= max(min_tail, 2)
    use = p.decay_reference
    if use == "auto":
        use = "tail" if tail_ok else "baseline"
    if use == "tail":
        if not tail_ok:
            return Skipped(b, "skip")
        ln_off = t1 / tc  # mean ln S of the tail: its noise bias cancels that of the bins
        ref_var = max(t2 - t1 * ln_off, 0.0) / (tc - 1) / tc
        tail_n = int(tc)
    else:
        if state.baseline is None:
            return Skipped(b, "no_reference")
        ln_off = math.log(state.baseline.value)
        ref_var = (state.baseline.sigma / state.baseline.value) ** 2
        tail_n = 0
    lnr = np.where(good, mean - ln_off, 0.0)
    on_n, on_1, on_2 = on_sums
    on_level, on_var = math.nan, 0.0
    if on_n >= 2:
        m_on = on_1 / on_n
        on_level = m_on - ln_off
        on_var = max(on_2 - on_1 * m_on, 0.0) / (on_n - 1) / on_n
    else:
        on_n = 0.0
    return Decay(
        b, c, lnr, ss, use, ref_var, float(np.sum(c) + tc), tail_n, on_n, on_level, on_var, float(ln_off)
    )


def add(core: DecayCore, item: Decay) -> DecayCore:
    if not isinstance(item, Decay):
        return core
    return dataclasses.replace(core, win=core.win.add(item), cum=core.cum.add(item), cum_fit=None)


def _decay_weights(stats: CurveStats, t: np.ndarray, used: np.ndarray) -> np.ndarray:
    """Relative standard deviations of the averaged curve's bins.

    From the within-bin scatter of ln S where bins hold several samples (smoothed over time
    with a quadratic in log variance, so that the weights do not follow the noise), else from
    the sample counts alone. The scatter between decays is not used: it also holds real
    differences of amplitude between decays (a pump still ramping up, pump noise), which are
    not noise about the averaged curve. Only the shape matters: the fit scales the covariance
    by its reduced chi-square.
    """
    cnt = stats.count[used]
    dof = stats.dof[used]
    if np.all(dof >= 3):
        var = stats.ss[used] / dof / cnt
        ok = var > 0
        if np.count_nonzero(ok) >= 6:
            coef = np.polyfit(t[ok], np.log(var[ok]), 2)
            return np.sqrt(np.exp(np.polyval(coef, t)))
    return 1.0 / np.sqrt(cnt)


def _rho_amp(fit: fitting.FitResult | None, rho: float) -> float:
    """The tail residual ``A rho`` to add back to every bin, from the previous fit."""
    return 0.0 if fit is None else fit.value("amplitude") * rho


def _offset_sensitivity(t: np.ndarray, a: float, tau: float, sig: np.ndarray) -> tuple[float, float]:
    """(dA/d delta, dtau/d delta) of the weighted fit when every point moves by -delta."""
    e = np.exp(-t / tau)
    jac = np.column_stack([e, a * t / tau**2 * e])
    w = 1.0 / sig**2
    jtw = jac.T * w
    try:
        sol = np.linalg.solve(jtw @ jac, jtw @ (-np.ones_like(t)))
    except np.linalg.LinAlgError:
        return math.nan, math.nan
    return float(sol[0]), float(sol[1])


def _decay_fit(state: EstimatorState, core: DecayCore, stats: CurveStats, dt: float) -> dict[str, Any] | None:
    p = state.params
    if stats.n_decays == 0:
        return None
    bn = core.bin_n
    j = np.arange(core.n_bins)
    t = (j + 0.5) * bn * dt  # bin centres after the edge (taken half a sample before the first off sample)
    used = (stats.count > 0) & (j * bn * dt >= p.decay_skip)
    if np.count_nonzero(used) < 4:
        return None
    tu = t[used]
    y = stats.w_y[used] / stats.count[used]
    sig = _decay_weights(stats, tu, used)
    # A tail taken as S_off still holds A rho(tau) of gain (rho: the tail's mean exp(-t/tau)),
    # so every bin reads A (exp(-t/tau) - rho); add A rho back with the latest fit (converges
    # in two passes, rho being ~1e-4).
    tail0 = int(math.ceil(p.decay_tail_start / dt))
    rho = 0.0
    fit = None
    for _ in range(3):
        try:
            fit = fitting.fit_exponential_decay(tu, y + _rho_amp(fit, rho), sig, tau_guess=p.tau)
        except ValueError:
            return None
        rho = stats.tail_residual(tail0, dt, fit.value("tau"))
        if rho == 0.0:
            break
    a, tau = fit.value("amplitude"), fit.value("tau")
    # bin averaging of a sampled exponential scales the amplitude only
    x = dt / (2.0 * tau)
    a *= bn * math.sinh(x) / math.sinh(bn * x) if bn > 1 else 1.0
    var_a = fit.covariance[0, 0]
    var_tau = fit.covariance[1, 1]
    # the unpumped level: per-decay tails average down, a stored baseline is common to all
    ref_var = stats.ref_var / stats.n_decays**2 + stats.ref_common
    da, dtau = _offset_sensitivity(tu, a, tau, sig)
    if math.isfinite(da):
        var_a += da * da * ref_var
        var_tau += dtau * dtau * ref_var
    return {
        "amplitude": a,
        "amplitude_sigma": math.sqrt(var_a),
        # where the pump really went off within its sample interval (uniform over dt): the
        # same for every decay of a chop commensurate with the sample clock, so systematic
        "amplitude_edge_sys": abs(a) * dt / tau / math.sqrt(12.0),
        "tau": tau,
        "tau_sigma": math.sqrt(var_tau),
        "chi2_reduced": fit.chi2_reduced,
        "dof": fit.dof,
        "t": tu,
        "y": y,
        "sigma": sig * math.sqrt(max(fit.chi2_reduced, 0.0)) if math.isfinite(fit.chi2_reduced) else sig,
    }


def _decay_level(
    state: EstimatorState, core: DecayCore, stats: CurveStats, fit: Mapping[str, Any]
) -> tuple[float, float] | None:
    """(ln R(0), its noise sigma) from the settled pump-on level before each decay, or None.

    Just before the pump goes off, ln R is the settled pump-on level, so ``ln R(0)`` is the
    mean over decays of (mean ln S of the settled pump-on samples before the edge) less
    (ln S_off of the same decay). This needs no edge position, unlike the fitted amplitude,
    whose extrapolation to the edge carries ``(A dt / tau)^2 / 12`` from an edge anywhere in
    its sample interval. A tail taken as ``S_off`` still holds ``ln R(0) rho`` of gain
    (`CurveStats.tail_residual`, with the fitted decay time), put back by dividing by
    ``1 - rho``. The noise is the scatter of the per-decay values (independent: each pairs an
    on level with the tail right after it) over sqrt(k), or for fewer than three decays their
    within-scatter; a stored baseline adds its own error once; the dark's share is added.
    """
    lv = stats.level
    if lv.k == 0:
        return None
    p = state.params
    dt = state.clock.dt
    tail0 = int(math.ceil(p.decay_tail_start / dt))
    rho = stats.tail_residual(tail0, dt, fit["tau"], of_levels=True)
    d = lv.mean()
    if lv.k >= 3:
        var = lv.std() ** 2 / lv.k
    else:
        var = stats.level_var / lv.k**2
    if any(n == 0 for n, _ in stats.level_tails):  # decays referred to the stored baseline
        var += stats.ref_common
    lnr0 = d / (1.0 - rho)
    ref = core.ref_sum / core.ref_n if core.ref_n else math.nan
    s_off = math.exp(stats.level_ln_off / lv.k)
    sn = math.hypot(math.sqrt(var) / (1.0 - rho), dark_noise(state.dark, ref, s_off, lnr0))
    return lnr0, sn


def _lifetime_from_decay(
    p: EstimatorParams, decay_time: float, sigma: float, wavelength: float | None
) -> tuple[float, float, float]:
    """(lifetime, its sigma, probe-stimulated rate) from the fitted decay time.

    With the pump off, a CW probe keeps stimulating transitions, so the inversion decays at
    ``1/tau + (sigma_e + sigma_a) Phi_s`` (the rate equation's relaxation rate; Koechner sec. 1.4)
    with ``Phi_s`` the probe photon flux weighted by the probe's own Gaussian profile,
    ``P / (pi w^2) / (h nu)`` (half the on-axis value). The lifetime is what remains. Pulsed
    probes are left uncorrected (their mean stimulated rate is negligible).
    """
    rate = probe_terms(p, wavelength)[1]  # the same rate as the sweep fit's (`bench.estimator.modes.sweep`)
    if not (rate > 0 and decay_time > 0):
        return decay_time, sigma, 0.0
    k = 1.0 / decay_time - rate
    if not k > 0:
        return decay_time, sigma, rate
    tau = 1.0 / k
    return tau, sigma * (tau / decay_time) ** 2, rate


def estimate(state: EstimatorState, core: DecayCore, scope: str, t: float, counts: Counts) -> Estimate:
    p = state.params
    stats = core.win if scope == "window" else core.cum
    wl = wavelength_of(state)
    uses_baseline = p.decay_reference == "baseline"
    flags = common_flags(state, t, counts, wl, uses_baseline=uses_baseline)
    if counts.no_reference:
        flags.add("no_baseline")
    extra: dict[str, Any] = {"n_decays": stats.n_decays}
    values: dict[str, Quantity] = {}
    fit = _decay_fit(state, core, stats, state.clock.dt) if stats.n_decays else None
    if fit is None:
        if stats.n_decays == 0:
            flags.add("not_settled" if counts.skipped else "low_snr")
        else:
            flags.add("low_snr")
    else:
        level = _decay_level(state, core, stats, fit)
        if level is not None:
            lnr0, sn0 = level
            values = figures(p, lnr0, sn0, wl)
            extra["ln_ratio_from"] = "on_level"
        else:
            values = with_ln_ratio_systematic(
                figures(p, fit["amplitude"], fit["amplitude_sigma"], wl), fit["amplitude_edge_sys"]
            )
            extra["ln_ratio_from"] = "fit"
        tau, tau_sigma, probe_rate = _lifetime_from_decay(p, fit["tau"], fit["tau_sigma"], wl)
        xs = p.cross_sections_at(wl)
        u_rate = 0.0
        if xs is not None and probe_rate > 0:
            # the correction's own uncertainty: the probe rate scales with sigma_e + sigma_a
            u_rate = probe_rate * p.u_cross_sections * math.hypot(*xs) / (xs[0] + xs[1])
        values["tau_s"] = quantity(tau, tau_sigma, tau * tau * u_rate)
        extra["decay_time_s"] = float(fit["tau"])
        extra["probe_rate_per_s"] = probe_rate
        q = values["ln_ratio"]
        if not abs(q.value) >= p.snr_min * q.sigma_noise:
            flags.add("low_snr")
        if not (fit["tau"] >= p.snr_min * fit["tau_sigma"]):
            flags.add("low_snr")
        extra["fit"] = {
            k: float(fit[k]) for k in ("amplitude", "amplitude_sigma", "tau", "tau_sigma", "chi2_reduced")
        }
        extra["fit"]["dof"] = int(fit["dof"])
        if scope == "cumulative":
            model = fit["amplitude"] * np.exp(-fit["t"] / fit["tau"])
            extra["curve"] = {
                "t_s": [float(v) for v in fit["t"]],
                "ln_ratio": [float(v) for v in fit["y"]],
                "sigma": [float(v) for v in fit["sigma"]],
                "fit": [float(v) for v in model],
            }
    return Estimate(
        t=t,
        mode=state.mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flags),
        n_samples=int(stats.n_samples),
        extra=MappingProxyType(extra),
    )


def new_core(params: EstimatorParams, settings: Mapping[str, Any], clock: Clock | None) -> DecayCore | None:
    if clock is None:
        return None  # built when the first block gives the sample interval
    bin_n = max(1, int(round(params.decay_bin / clock.dt)))
    n_bins = max(3, int(math.ceil(params.decay_fit_span / (bin_n * clock.dt))))
    return DecayCore(n_bins=n_bins, bin_n=bin_n, win=CurveStats.empty(n_bins), cum=CurveStats.empty(n_bins))


def reset_window(core: DecayCore) -> DecayCore:
    return dataclasses.replace(core, win=CurveStats.empty(core.n_bins))


def flush(state: EstimatorState) -> EstimatorState:
    """Count an open decay that already covers the fit span (for `report`)."""
    core = state.core
    if core.open_edge >= 0 and core.open_sums is not None:
        fit_n = core.n_bins * core.bin_n
        if state.clock.next_index - core.open_edge >= fit_n:
            p = state.params
            tail0 = int(math.ceil(p.decay_tail_start / state.clock.dt))
            item = _finish_decay(
                state,
                core,
                core.open_edge,
                state.clock.next_index,
                core.open_sums,
                fit_n,
                tail0,
                state.clock.dt,
            )
            core = add(core, item)
    return dataclasses.replace(state, core=core)


def _settle(params: EstimatorParams, settings: Mapping[str, Any]) -> tuple[float, float]:
    return params.rise_settle(settings.get("pump_power")), params.settle_time


# -- timing: the pump-off half holds the decay record, the pump-on half a settled on level ---------


def _half_periods(params: EstimatorParams, pump_power: float | None) -> tuple[float, float]:
    return params.rise_settle(pump_power), params.decay_fit_span


def _default_half(params: EstimatorParams, pump_power: float | None, rise: float, off: float) -> float:
    return max(params.decay_record, (1.0 + timing.DECAY_ON_SHARE) * rise)


def _refusal(
    params: EstimatorParams, period: float, pump_power: float | None, rise: float, off: float
) -> str | None:
    half = 0.5 * period
    if not half < off:
        return None
    ms = 1e3
    return (
        f"decay mode: a pump period of {period * ms:.4g} ms leaves {half * ms:.4g} ms after each pump-off "
        f"edge, shorter than the {off * ms:.3g} ms of decay that is fitted: no decay can be "
        f"used. It needs a period of at least {2 * off * ms:.3g} ms; the default is "
        f"{timing.default_period(params, 'decay', pump_power) * ms:.4g} ms"
    )


TIMING = Timing(half_periods=_half_periods, default_half=_default_half, refusal=_refusal)

MODE = Mode(
    name="decay",
    new_core=new_core,
    ingest=ingest,
    add=add,
    reset_window=reset_window,
    estimate=estimate,
    flush=flush,
    settle=_settle,
    pump_steady=lambda settings: False,
    words="decay: gain decay after the pump switches off (lifetime)",
    cli_words="decay: lifetime from pump-off transients",
    describe="decay, pump period {decay_ms:g} ms",
    timing=TIMING,
    period="decay",
)
