"""Dark, baseline and background: the procedures around a measurement, and their records.

`capture_dark` takes the detector readings with the probe blocked, `capture_baseline` the
pump-off normalised transmission ``S_off = (V_probe - dark_p) / (V_ref - dark_r)``, and
`capture_background` the probe detector's reading with the probe blocked and the pump on:
the sample's own fluorescence and scattered pump light, which rise with the pump and which the
dark (pump off) does not hold. All give standard errors from the scatter of contiguous batch
means (Flyvbjerg and Petersen). No I/O.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from bench.records import PROBE, PUMP_MONITOR, REFERENCE, Block

__all__ = ["Dark", "Baseline", "Background", "capture_dark", "capture_baseline", "capture_background"]


@dataclass(frozen=True)
class Dark:
    """Detector readings with the probe blocked (V), with their standard errors.

    ``t`` is the run-clock time of the last sample used.
    """

    probe: float
    probe_sigma: float
    reference: float
    reference_sigma: float
    n_samples: int
    t: float


@dataclass(frozen=True)
class Baseline:
    """Pump-off normalised transmission ``S_off`` and its standard error.

    ``t`` is the run-clock time of the last sample used (its age is measured from there),
    ``t_start`` that of the first.
    """

    value: float
    sigma: float
    n_samples: int
    t: float
    t_start: float
    #: Mean dark-corrected reference (V) over the baseline: the probe level is ``value`` times it.
    reference_v: float = math.nan


@dataclass(frozen=True)
class Background:
    """The probe detector's pump-induced background (V above its dark), with its standard error.

    Measured with the probe blocked and the pump on; ``pump_monitor_v`` is the pump monitor's
    mean over it (NaN without a monitor), ``t`` the run-clock time of the last sample used.
    """

    probe: float
    probe_sigma: float
    pump_monitor_v: float
    n_samples: int
    t: float


def _columns(blocks: Iterable[Block], names: tuple[str, ...], what: str):
    parts: dict[str, list[np.ndarray]] = {n: [] for n in names}
    t_first = t_last = None
    for block in blocks:
        if not isinstance(block, Block):
            raise ValueError(f"blocks: expected Block objects, got {type(block).__name__}")
        if block.n == 0:
            continue
        for n in names:
            if n not in block.channels:
                raise ValueError(
                    f"blocks: block {block.seq} from {block.source} has no {n!r} channel for the {what}"
                )
            parts[n].append(block.column(n))
        t_first = block.t0 if t_first is None else t_first
        t_last = block.t_end
    if t_first is None:
        raise ValueError(f"blocks: no samples to take the {what} from")
    return {n: np.concatenate(v) for n, v in parts.items()}, float(t_first), float(t_last)


def _mean_and_error(x: np.ndarray, batches: int) -> tuple[float, float]:
    """Mean of a time series and its standard error from ``batches`` contiguous batch means."""
    n = x.size
    k = min(batches, n)
    if k < 2:
        raise ValueError(f"blocks: need at least 2 samples, got {n}")
    edges = (np.arange(k + 1) * n) // k
    sums = np.add.reduceat(x, edges[:-1])
    counts = np.diff(edges).astype(np.float64)
    mean = float(np.sum(sums) / n)
    dev = sums / counts - mean
    var = float(np.sum(counts**2 * dev**2)) / n**2 * k / (k - 1)
    return mean, math.sqrt(var)


def capture_dark(blocks: Iterable[Block], *, batches: int = 20) -> Dark:
    """Dark levels from blocks taken with the probe blocked.

    The standard errors come from the scatter of ``batches`` contiguous batch means.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    """
    if not (isinstance(batches, int) and batches >= 2):
        raise ValueError(f"batches: must be a whole number of at least 2, got {batches!r}")
    cols, _, t_last = _columns(blocks, (PROBE, REFERENCE), "dark")
    p, sp = _mean_and_error(cols[PROBE], batches)
    r, sr = _mean_and_error(cols[REFERENCE], batches)
    return Dark(p, sp, r, sr, int(cols[PROBE].size), t_last)


def capture_baseline(
    blocks: Iterable[Block],
    dark: Dark | None = None,
    *,
    batches: int = 20,
    pump_threshold_v: float | None = None,
) -> Baseline:
    """Pump-off baseline ``S_off = (V_probe - dark_p) / (V_ref - dark_r)`` from blocks.

    Parameters
    ----------
    blocks : iterable of Block
        Detector blocks taken with the pump off.
    dark : Dark, optional
        Subtracted from every sample (zero volts if None).
    batches : int, optional
        Number of contiguous batches for the standard error (default 20).
    pump_threshold_v : float, optional
        If given, samples whose ``pump_monitor`` is above it are left out.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    """
    if not (isinstance(batches, int) and batches >= 2):
        raise ValueError(f"batches: must be a whole number of at least 2, got {batches!r}")
    blocks = list(blocks)
    names = (PROBE, REFERENCE) + ((PUMP_MONITOR,) if pump_threshold_v is not None else ())
    cols, t_first, t_last = _columns(blocks, names, "baseline")
    dp, dr = (dark.probe, dark.reference) if dark is not None else (0.0, 0.0)
    den = cols[REFERENCE] - dr
    if np.any(den <= 0):
        raise ValueError("blocks: the reference is at or below its dark level; no baseline can be taken")
    s = (cols[PROBE] - dp) / den
    if pump_threshold_v is not None:
        s = s[cols[PUMP_MONITOR] <= pump_threshold_v]
    m, sm = _mean_and_error(s, batches)
    if not m > 0:
        raise ValueError("blocks: the probe is at or below its dark level; no baseline can be taken")
    ref = den if pump_threshold_v is None else den[cols[PUMP_MONITOR] <= pump_threshold_v]
    return Baseline(m, sm, int(s.size), t_last, t_first, float(np.mean(ref)))


def capture_background(
    blocks: Iterable[Block],
    dark: Dark | None,
    *,
    batches: int = 20,
    pump_threshold_v: float | None = None,
    settle_s: float = 0.0,
) -> Background:
    """The probe detector's background with the probe blocked and the pump on, above the dark.

    With ``pump_threshold_v`` (and a ``pump_monitor`` channel) only samples whose monitor is
    above it count, and the monitor's mean is kept so that the background can be scaled with
    the pump; with ``settle_s`` also only those at least that long after the pump last came on
    (a modulated pump: the fluorescence rises with the medium, and the estimate uses settled
    pump-on samples). The dark's own error is not in the sigma (the estimate counts it apart).

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    """
    if not (isinstance(batches, int) and batches >= 2):
        raise ValueError(f"batches: must be a whole number of at least 2, got {batches!r}")
    if dark is None:
        raise ValueError(
            "dark: the background is the pump-induced part of the blocked probe's level, above "
            "its dark; capture a dark first"
        )
    blocks = list(blocks)
    with_monitor = bool(blocks) and all(PUMP_MONITOR in b.channels for b in blocks if b.n)
    names = (PROBE,) + ((PUMP_MONITOR,) if with_monitor else ())
    cols, _, t_last = _columns(blocks, names, "background")
    vp = cols[PROBE] - dark.probe
    monitor = math.nan
    if with_monitor:
        pm = cols[PUMP_MONITOR]
        if pump_threshold_v is not None:
            keep = pm > pump_threshold_v
            if settle_s > 0 and keep.any():
                times = np.concatenate([b.times() for b in blocks if b.n])
                rising = np.flatnonzero(keep[1:] & ~keep[:-1]) + 1
                since = np.full(times.size, np.inf)
                if rising.size:
                    marks = np.full(times.size, -1)
                    marks[rising] = rising
                    last = np.maximum.accumulate(marks)  # index of the latest rising edge
                    has = last >= 0
                    since[has] = times[has] - times[last[has]]
                keep &= since >= settle_s * (1.0 - 1e-9)  # times are sums of floats
            if not np.any(keep):
                raise ValueError(
                    "blocks: the pump monitor shows the pump off; the background needs the pump on"
                )
            vp, pm = vp[keep], pm[keep]
        monitor = float(np.mean(pm))
    b, sb = _mean_and_error(vp, batches)
    return Background(b, sb, monitor, int(vp.size), t_last)
