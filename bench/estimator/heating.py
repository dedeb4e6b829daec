"""Sample heating in the estimator: the sample's temperature as read, and ln R corrected to the
baseline's temperature (`bench.physics.ln_ratio_at_baseline_temperature`).

The temperature comes in the pump's readings (channel ``sample_temp``, K; any instrument that
reads the sample or its mount may put it there). `Temperatures` keeps the last readings (for the
baseline's mean over its own window) and the mean, scatter and range since the scope began
(the cumulative estimate's). Correcting needs the bench file's temperature coefficients
(``sample.temperature_dependence``); without them nothing changes. The correction's noise part
is the standard error of the scope's mean temperature from the readings' own noise, taken
from successive differences (von Neumann's mean square successive difference, which a slow
drift of the sample does not inflate: J. von Neumann et al., Ann. Math. Stat. 12, 153 (1941);
S_on averages uniformly over the same time, so the mean temperature is the one to correct
with, to first order). Its systematic part comes from the coefficients' stated uncertainty (``sample.uncertainty.temperature_dependence``), both propagated linearly
(GUM sec. 5.1). Flags: ``temperature_drift`` when the scope's readings span more than
`DRIFT_FLAG_K`; ``temperature_unknown`` when coefficients are given but there is no reading of
the baseline's or the scope's temperature to correct with. No I/O.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from bench import physics
from bench.records import SAMPLE_TEMP, Block

__all__ = [
    "Temperatures",
    "take_readings",
    "restart_scope",
    "at_baseline",
    "corrected_ln_ratio",
    "DRIFT_FLAG_K",
]

#: A scope whose temperature readings span more than this (K) is flagged ``temperature_drift``.
DRIFT_FLAG_K = 1.0
#: Seconds of readings kept for the baseline's mean.
HISTORY_S = 30.0


@dataclass(frozen=True, eq=False)
class Temperatures:
    """The sample temperature readings the estimator holds (K; times on the run clock, s).

    A reading counts towards the scope's statistics once the detector data have passed its
    time (`advance_to`), whatever order the readings and the detector blocks arrive in: a live
    run and its replay (which feeds blocks in time order) then count the same readings.
    """

    times: np.ndarray = dataclasses.field(default_factory=lambda: np.empty(0))  # the last HISTORY_S
    values: np.ndarray = dataclasses.field(default_factory=lambda: np.empty(0))
    pending_t: np.ndarray = dataclasses.field(default_factory=lambda: np.empty(0))  # not yet counted
    pending_v: np.ndarray = dataclasses.field(default_factory=lambda: np.empty(0))
    scope_from: float = -math.inf  # readings before this belong to an earlier scope
    n: int = 0  # counted since the scope began
    total: float = 0.0
    successive_sq: float = 0.0  # sum of squared differences of successive readings
    last: float = math.nan
    lo: float = math.inf
    hi: float = -math.inf
    baseline: float | None = None  # mean over the baseline's window

    @property
    def mean(self) -> float:
        return self.total / self.n if self.n else math.nan

    @property
    def standard_error(self) -> float:
        """Of the mean: one reading's noise from successive differences, over sqrt(n)."""
        if self.n < 3:
            return math.nan
        return math.sqrt(self.successive_sq / (2.0 * (self.n - 1)) / self.n)


def take_readings(temps: Temperatures, block: Block) -> Temperatures:
    """``temps`` with the sample temperatures of ``block`` (if it has any) waiting to count."""
    if SAMPLE_TEMP not in block.channels or block.n == 0:
        return temps
    v = block.column(SAMPLE_TEMP)
    t = block.times()
    ok = np.isfinite(v)
    if not ok.any():
        return temps
    v, t = v[ok], t[ok]
    times = np.concatenate((temps.times, t))
    values = np.concatenate((temps.values, v))
    keep = times >= times.max() - HISTORY_S
    return dataclasses.replace(
        temps,
        times=times[keep],
        values=values[keep],
        pending_t=np.concatenate((temps.pending_t, t)),
        pending_v=np.concatenate((temps.pending_v, v)),
    )


def advance_to(temps: Temperatures, t: float) -> Temperatures:
    """Count the waiting readings up to time ``t`` (the detector data have reached it)."""
    if temps.pending_t.size == 0 or temps.pending_t.min() > t:
        return temps
    due = temps.pending_t <= t
    order = np.argsort(temps.pending_t[due], kind="stable")
    dt, dv = temps.pending_t[due][order], temps.pending_v[due][order]
    v = dv[dt >= temps.scope_from]
    rest = dict(pending_t=temps.pending_t[~due], pending_v=temps.pending_v[~due])
    if v.size == 0:
        return dataclasses.replace(temps, **rest)
    chain = v if math.isnan(temps.last) else np.concatenate(([temps.last], v))
    return dataclasses.replace(
        temps,
        **rest,
        n=temps.n + int(v.size),
        total=temps.total + float(np.sum(v)),
        successive_sq=temps.successive_sq + float(np.sum(np.diff(chain) ** 2)),
        last=float(v[-1]),
        lo=min(temps.lo, float(np.min(v))),
        hi=max(temps.hi, float(np.max(v))),
    )


def restart_scope(temps: Temperatures, t_from: float = -math.inf) -> Temperatures:
    """A new cumulative scope from run-clock time ``t_from``: the statistics cleared, readings
    before ``t_from`` no longer counted."""
    return dataclasses.replace(
        temps, scope_from=t_from, n=0, total=0.0, successive_sq=0.0, last=math.nan, lo=math.inf, hi=-math.inf
    )


def at_baseline(temps: Temperatures, t_start: float, t_end: float) -> Temperatures:
    """``temps`` with the baseline's temperature: the mean of the readings in its window (the
    newest reading before it when none falls inside; unchanged without readings)."""
    if temps.times.size == 0:
        return temps
    inside = (temps.times >= t_start) & (temps.times <= t_end)
    if inside.any():
        value = float(np.mean(temps.values[inside]))
    else:
        before = temps.times <= t_end
        if not before.any():
            return temps
        value = float(temps.values[before][-1])
    return dataclasses.replace(temps, baseline=value)


def corrected_ln_ratio(
    params, temps: Temperatures, ln_ratio: float, n2_off: float, *, both_warm: bool = False
):
    """(ln R0, its noise sigma from the temperature, its systematic sigma, extra, flags).

    ``ln R0`` is ``ln_ratio`` at the baseline's temperature; without coefficients it is
    ``ln_ratio`` itself with zero sigmas and no flags. ``both_warm``: the pump-off reference
    of ``ln_ratio`` was taken at the same (warm) temperature as its pump-on part (a modulated
    mode; `bench.physics.ln_ratio_of_a_warm_modulated_sample`), not at the baseline.
    """
    ka, ke = params.sigma_a_per_kelvin, params.sigma_e_per_kelvin
    if ka == 0 and ke == 0:
        return ln_ratio, 0.0, 0.0, {}, set()
    if temps.baseline is None or temps.n == 0:
        return ln_ratio, 0.0, 0.0, {}, {"temperature_unknown"}
    dt = temps.mean - temps.baseline

    def at(d: float, ka_: float = ka, ke_: float = ke) -> float:
        if both_warm:
            return float(
                physics.ln_ratio_of_a_warm_modulated_sample(
                    ln_ratio, d, params.sigma_e, params.sigma_a, ke_, ka_
                )
            )
        return float(
            physics.ln_ratio_at_baseline_temperature(
                ln_ratio, d, params.sigma_e, params.sigma_a, params.n_total, params.length, n2_off, ke_, ka_
            )
        )

    value = at(dt)
    step = 0.01
    slope = (at(dt + step) - at(dt - step)) / (2 * step)
    se_t = temps.standard_error
    noise = abs(slope) * se_t if math.isfinite(se_t) else 0.0
    u = params.u_temperature_dependence
    sys = math.hypot(at(dt, ka * (1 + u), ke) - value, at(dt, ka, ke * (1 + u)) - value) if u > 0 else 0.0
    flags = {"temperature_drift"} if temps.hi - temps.lo > DRIFT_FLAG_K else set()
    if both_warm and abs(dt) > DRIFT_FLAG_K:
        # the halves are taken as equally warm; a sample whose thermal time is not far longer
        # than the period is warmer in the pump-on half (not corrected, not in sigma)
        flags.add("heating_ripple")
    extra = {
        "sample_temperature_k": temps.mean,
        "baseline_temperature_k": temps.baseline,
        "heating_k": dt,
        "ln_ratio_as_measured": ln_ratio,
    }
    return value, noise, sys, extra, flags
