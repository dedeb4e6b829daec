"""How much CPU the online estimator needs per sample set: `estimator_cost_per_sample`.

The figure to compare with is the acquisition rate: at 1 M sample sets per second (probe and
reference at 1 MS/s each, plus the pump monitor) the estimator must stay well under a quarter
of one core, i.e. under 250 ns of CPU per sample set. The measurement feeds synthetic blocks
(made beforehand, not timed) through `bench.estimator.update` and reads the process CPU clock.
"""

from __future__ import annotations

import time

import numpy as np

from bench.config import BenchConfig, load_bench
from bench.estimator import (
    MODES,
    Baseline,
    Dark,
    EstimatorParams,
    mode_of,
    new_state,
    report,
    update,
    with_baseline,
    with_dark,
    with_setting,
)
from bench.records import Block

_CHANNELS = ("probe", "reference", "pump_monitor")


def _synthetic_blocks(mode: str, rate: float, seconds: float, block_size: int, seed: int) -> list[Block]:
    rng = np.random.default_rng(seed)
    n = int(rate * seconds)
    t = np.arange(n) / rate
    if not mode_of(mode).pump_steady({}):  # modulated (chopped, decay)
        on = (np.floor(t * 2 * 50.0) % 2) == 1  # 50 Hz square wave
    else:
        on = np.ones(n, dtype=bool)
    # a first-order response of ln R to the pump, rise and fall time constants 0.3 and 0.6 ms
    lnr = np.zeros(n)
    edges = np.flatnonzero(on[1:] != on[:-1]) + 1
    bounds = [0, *edges.tolist(), n]
    x = 0.0
    for a, b in zip(bounds[:-1], bounds[1:]):
        target, k = (0.46, 1 / 0.3e-3) if on[a] else (0.0, 1 / 0.6e-3)
        s = np.arange(b - a + 1) / rate
        seg = target + (x - target) * np.exp(-k * s)
        lnr[a:b] = seg[:-1]
        x = seg[-1]
    ref = 0.6 * (1 + 2e-3 * rng.standard_normal(n))
    data = np.empty((n, 3))
    data[:, 0] = 0.003 + 0.8 * np.exp(lnr) * ref / 0.6 + 5e-4 * rng.standard_normal(n)
    data[:, 1] = 0.002 + ref + 5e-4 * rng.standard_normal(n)
    data[:, 2] = np.where(on, 0.46, 0.0) + 5e-4 * rng.standard_normal(n)
    return [
        Block("detector", k, i / rate, 1.0 / rate, i, _CHANNELS, data[i : i + block_size])
        for k, i in enumerate(range(0, n, block_size))
    ]


def estimator_cost_per_sample(
    mode: str = "watch",
    *,
    rate: float = 1e6,
    seconds: float = 2.0,
    block_size: int = 100_000,
    seed: int = 0,
    cfg: BenchConfig | None = None,
) -> float:
    """CPU seconds per sample set spent in `update` (and one final `report`) in ``mode``.

    Parameters
    ----------
    mode : str
        One of `bench.estimator.MODES` (sweep runs one step, measured as in watch mode).
    rate : float
        Sample sets per second of the synthetic stream (sets the batch and bin sizes).
    seconds : float
        Length of the stream.
    block_size : int
        Sample sets per block, as a digitiser read would deliver them.
    seed : int
        Seed of the synthetic noise.
    cfg : BenchConfig, optional
        The bench; the built-in demo bench by default.
    """
    if mode not in MODES:
        raise ValueError(f"mode: {mode!r} is not one of {', '.join(MODES)}")
    if not (rate > 0 and seconds > 0):
        raise ValueError("rate, seconds: must be positive")
    if not (isinstance(block_size, int) and block_size >= 1):
        raise ValueError(f"block_size: must be a whole number of at least 1, got {block_size!r}")
    cfg = load_bench() if cfg is None else cfg
    params = EstimatorParams.from_config(cfg, pump_threshold_v=0.2)
    blocks = _synthetic_blocks(mode, rate, seconds, block_size, seed)
    state = new_state(params, mode)
    state = with_dark(state, Dark(0.003, 1e-6, 0.002, 1e-6, 10_000, 0.0))
    state = with_baseline(state, Baseline(0.8 / 0.6, 1e-6, 10_000, 0.0, 0.0))
    if mode_of(mode).steps_pump:
        state = with_setting(state, pump_power=4.4)
    start = time.process_time()
    for block in blocks:
        state, _ = update(state, block)
    report(state)
    used = time.process_time() - start
    return used / sum(b.n for b in blocks)
