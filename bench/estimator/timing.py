"""Timing of the modulated modes: the default pump periods and the check before a run.

A chopped or decay run uses each half-period of the pump modulation only after its settle
window (`EstimatorParams.rise_settle` after a rising edge, `EstimatorParams.off_settle` after
a falling one in chopped mode; a decay needs ``decay_fit_span`` after the falling edge and its
tail up to ``decay_record``). The defaults here follow those windows; `check_timing` refuses,
before anything starts, a period that leaves no settled data, with the figures. Each mode's
rule (its half-periods, default and refusal) is the ``timing`` of its `bench.estimator.mode.Mode`
record, in its own module; the functions here look it up by mode name.

No I/O: pure functions of the estimator parameters.
"""

from __future__ import annotations

import math

from bench.errors import ConfigError
from bench.estimator.mode import MODES
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


def _timing(mode: str):
    """The timing rule of ``mode`` from the table of modes (None: not modulated, or unknown)."""
    m = MODES.get(mode)
    return None if m is None else m.timing


def required_half_periods(
    params: EstimatorParams, mode: str, pump_power: float | None
) -> tuple[float, float]:
    """(pump-on, pump-off) half-period lengths (s) below which a mode has no settled data."""
    rule = _timing(mode)
    if rule is None:
        raise ValueError(f"mode: {mode!r} has no pump modulation (chopped or decay)")
    return rule.half_periods(params, pump_power)


def default_period(params: EstimatorParams, mode: str, pump_power: float | None) -> float:
    """Default pump modulation period (s) of a modulated mode, 50 % duty cycle.

    Each mode's timing rule gives the half-period (`bench.estimator.mode.Timing`). Chopped:
    each half-period at least `SETTLE_SHARE` times the longer settle window. Decay: the pump-off
    half holds the whole decay record (``decay_record``, whose late part is the unpumped
    reference) and the pump-on half `DECAY_ON_SHARE` + 1 rise settle windows (the settled on
    level gives ln R(0)). Sweep: as chopped (every step chopped). Rounded up with `nice_ceil`.
    """
    rule = _timing(mode)
    if rule is None:
        raise ValueError(f"mode: {mode!r} has no pump modulation (chopped or decay)")
    rise, off = rule.half_periods(params, pump_power)
    half = rule.default_half(params, pump_power, rise, off)
    lo, hi = MODULATION_RANGE
    period = nice_ceil(2.0 * half)
    return min(1.0 / lo, max(1.0 / hi, period))


def check_timing(params: EstimatorParams, mode: str, period: float, pump_power: float | None) -> None:
    """Raise `TimingError` naming the figures when ``period`` leaves ``mode`` no settled data.

    Modes without modulation (watch) always pass; a sweep is judged as chopped (every step
    chopped).
    """
    rule = _timing(mode)
    if rule is None:
        return
    if not (math.isfinite(period) and period > 0):
        raise TimingError(f"pump period: {period!r} s is not a positive time")
    rise, off = rule.half_periods(params, pump_power)
    message = rule.refusal(params, period, pump_power, rise, off)
    if message is not None:
        raise TimingError(message)


def run_period(cfg, mode: str, current: float, period: float | None = None) -> float:
    """The pump modulation period (s) a modulated run (chopped, decay, sweep) on bench ``cfg`` at pump
    ``current`` (A) will use: ``period`` if given, else `default_period`; `TimingError` (with
    the figures) if it leaves no settled data. Cheap and without I/O: call it before anything
    is opened."""
    params = EstimatorParams.from_config(cfg)
    power = cfg.pump.power_at(current)
    chosen = default_period(params, mode, power) if period is None else float(period)
    check_timing(params, mode, chosen, power)
    return chosen
