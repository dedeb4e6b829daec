"""Timing of the modulated modes: the default pump periods and the check before a run.

A chopped or decay run uses each half-period of the pump modulation only after its settle
window (`EstimatorParams.rise_settle` after a rising edge, `EstimatorParams.off_settle` after
a falling one in chopped mode; a decay needs ``decay_fit_span`` after the falling edge and its
tail up to ``decay_record``). The defaults here follow those windows; `check_timing` refuses,
before anything starts, a period that leaves no settled data, with the figures.

No I/O: pure functions of the estimator parameters.
"""

from __future__ import annotations

import math

from bench.errors import ConfigError
from bench.estimator.params import EstimatorParams

#: Each half-period of a default chopping period holds at least this many settle windows, so
#: that at least two thirds of the data are used.
SETTLE_SHARE = 3.0

#: Mantissas of the "sensible" periods a default is rounded up to (1, 1.2, 1.5, 2 ... 8 x 10^n).
NICE_STEPS = (1.0, 1.2, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0)

#: The pump driver's modulation range (Hz) the defaults stay within.
MODULATION_RANGE = (0.1, 1e4)

#: In decay mode, the pump-on half also holds this many rise settle windows, so that the
#: settled pump-on level (ln R at the start of each decay) is measured on at least as long a
#: stretch as the settle window itself.
DECAY_ON_SHARE = 2.0


class TimingError(ConfigError):
    """A pump period that leaves a mode no settled data."""


def nice_ceil(x: float) -> float:
    """The smallest ``m 10^n`` with ``m`` in `NICE_STEPS` that is at least ``x`` (> 0)."""
    if not (math.isfinite(x) and x > 0):
        raise ValueError(f"x: must be a positive number, got {x!r}")
    e = math.floor(math.log10(x))
    for n in (e - 1, e, e + 1):
        for m in NICE_STEPS:
            v = m * 10.0**n
            if v >= x * (1 - 1e-12):
                return float(f"{v:.12g}")
    return 10.0 ** (e + 1)  # not reached


def required_half_periods(params: EstimatorParams, mode: str, pump_power: float | None) -> tuple[float, float]:
    """(pump-on, pump-off) half-period lengths (s) below which a mode has no settled data."""
    rise = params.rise_settle(pump_power)
    if mode == "chopped":
        return rise, params.off_settle()
    if mode == "decay":
        return rise, params.decay_fit_span
    raise ValueError(f"mode: {mode!r} has no pump modulation (chopped or decay)")


def default_period(params: EstimatorParams, mode: str, pump_power: float | None) -> float:
    """Default pump modulation period (s) of chopped or decay mode, 50 % duty cycle.

    Chopped: each half-period at least `SETTLE_SHARE` times the longer settle window, rounded
    up with `nice_ceil`. Decay: the pump-off half holds the whole decay record
    (``decay_record``, whose late part is the unpumped reference) and the pump-on half
    `DECAY_ON_SHARE` + 1 rise settle windows (the settled on level gives ln R(0)).
    """
    rise, off = required_half_periods(params, mode, pump_power)
    if mode == "chopped":
        half = SETTLE_SHARE * max(rise, off)
    else:
        half = max(params.decay_record, (1.0 + DECAY_ON_SHARE) * rise)
    lo, hi = MODULATION_RANGE
    period = nice_ceil(2.0 * half)
    return min(1.0 / lo, max(1.0 / hi, period))


def check_timing(params: EstimatorParams, mode: str, period: float, pump_power: float | None) -> None:
    """Raise `TimingError` naming the figures when ``period`` leaves ``mode`` no settled data.

    Watch and sweep modes have no modulation and always pass.
    """
    if mode not in ("chopped", "decay"):
        return
    if not (math.isfinite(period) and period > 0):
        raise TimingError(f"pump period: {period!r} s is not a positive time")
    half = 0.5 * period
    rise, off = required_half_periods(params, mode, pump_power)
    power = "no pump power" if not pump_power else f"{pump_power:.3g} W of pump"
    ms = 1e3
    if mode == "chopped" and (half <= rise or half <= off):
        raise TimingError(
            f"chopped mode: a pump period of {period * ms:.4g} ms has half-periods of {half * ms:.4g} ms, "
            f"but the pump-on part is used only from {rise * ms:.3g} ms after its edge ({power}) and the "
            f"pump-off part from {off * ms:.3g} ms after its edge: no settled data. It needs a period above "
            f"{2 * max(rise, off) * ms:.3g} ms; the default is {default_period(params, mode, pump_power) * ms:.4g} ms")
    if mode == "decay" and half < off:
        raise TimingError(
            f"decay mode: a pump period of {period * ms:.4g} ms leaves {half * ms:.4g} ms after each pump-off "
            f"edge, shorter than the {off * ms:.3g} ms of decay that is fitted: no decay can be "
            f"used. It needs a period of at least {2 * off * ms:.3g} ms; the default is "
            f"{default_period(params, mode, pump_power) * ms:.4g} ms")


def run_period(cfg, mode: str, current: float, period: float | None = None) -> float:
    """The pump modulation period (s) a chopped or decay run on bench ``cfg`` at pump
    ``current`` (A) will use: ``period`` if given, else `default_period`; `TimingError` (with
    the figures) if it leaves no settled data. Cheap and without I/O: call it before anything
    is opened."""
    params = EstimatorParams.from_config(cfg)
    power = cfg.pump.power_at(current)
    chosen = default_period(params, mode, power) if period is None else float(period)
    check_timing(params, mode, chosen, power)
    return chosen
