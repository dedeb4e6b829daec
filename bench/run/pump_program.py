"""The pump program's defaults: the pump current a run uses, the modulation of the chopped and
decay modes, and the current steps of a sweep, all from the bench file."""

from __future__ import annotations

from bench.config import BenchConfig
from bench.estimator.params import EstimatorParams
from bench.estimator.timing import default_period


def default_current(cfg: BenchConfig) -> float:
    """80 % of the lower of the pump's and the guard's current limits."""
    return 0.8 * min(cfg.pump.max_current, cfg.guard.max_current)


def chop_frequency(cfg: BenchConfig, mode: str, current: float | None = None) -> float:
    """Default pump modulation (Hz) of chopped and decay modes at ``current`` (default: the
    default current), from the settle windows (`bench.estimator.timing.default_period`)."""
    i = default_current(cfg) if current is None else current
    return 1.0 / default_period(EstimatorParams.from_config(cfg), mode, cfg.pump.power_at(i))


def sweep_currents(cfg: BenchConfig, steps: int) -> list[float]:
    """Pump currents of a sweep: from just above threshold to the default current."""
    lo = cfg.pump.threshold_current + 0.1 * (default_current(cfg) - cfg.pump.threshold_current)
    hi = default_current(cfg)
    if steps < 2:
        return [hi]
    return [lo + (hi - lo) * k / (steps - 1) for k in range(steps)]
