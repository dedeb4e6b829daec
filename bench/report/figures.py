"""The figures of a run report: matplotlib on the Agg canvas (no display, no pyplot state).

Each ``*_figure`` function takes plain data (estimates, events, a decimated trace) and returns
a `matplotlib.figure.Figure`, or None when the run holds nothing to draw; `save_png` writes one.
The only reading done here is `signal_trace`, which streams a run's detector blocks once through
`MinMaxDecimator` (bounded memory whatever the run's length) and reads the dark captures and the
pump's output state on the way.

Style: the colour-blind-safe palette of Okabe and Ito [1]_ (also recommended by Wong [2]_);
wherever two series share an axis they differ in line style or marker too, so a figure printed
in grey still reads. Text that comes from the run (run ids, labels) is drawn as plain text:
``$`` is escaped so that it is never parsed as mathtext.

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people", J*Fly, 2008 (the eight-colour palette).
.. [2] B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from scipy import constants

from bench import physics
from bench.physics import fitting
from bench.records import PROBE, PUMP_MONITOR, PUMP_ON, REFERENCE, Block, Estimate, Event

#: Okabe-Ito colours by name.
BLACK = "#000000"
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"
GREEN = "#009E73"
YELLOW = "#F0E442"
BLUE = "#0072B2"
VERMILLION = "#D55E00"
PURPLE = "#CC79A7"
GREY = "#7f7f7f"

#: Per analysis (series) of one figure: colour, line style, marker, band hatch.
SERIES_STYLES = (
    (BLUE, "-", "o", None),
    (VERMILLION, "--", "s", "//"),
    (GREEN, ":", "^", "\\\\"),
    (PURPLE, "-.", "D", "xx"),
    (ORANGE, (0, (5, 1, 1, 1)), "v", ".."),
)

#: Guard states on the timeline: colour and hatch (the hatch tells them apart without colour).
STATE_STYLES = {
    "safe": (GREEN, ""),
    "armed": (YELLOW, "//"),
    "emitting": (VERMILLION, "xx"),
    "tripped": (PURPLE, ".."),
}

RC = {
    "font.size": 10,
    "axes.titlesize": 11,
    "axes.labelsize": 10,
    "legend.fontsize": 8.5,
    "axes.grid": True,
    "grid.alpha": 0.3,
    "grid.linestyle": ":",
    "savefig.dpi": 100,
    "text.usetex": False,
}

#: Signal channels of the trace: (name, axis label).
SIGNAL_PANELS = (
    (PROBE, "probe (V)"),
    (REFERENCE, "reference (V)"),
    ("S", "S (normalised\ntransmission)"),
    (PUMP_MONITOR, "pump monitor (V)"),
)


def plain(text: Any) -> str:
    """Run text made safe for a matplotlib label (no mathtext)."""
    return str(text).replace("$", r"\$")


def _figure(width: float, height: float) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def save_png(fig: Figure, path: str | Path, dpi: int = 100) -> Path:
    """Write ``fig`` as a PNG file; returns the path."""
    if not isinstance(fig, Figure):
        raise ValueError(f"fig: expected a matplotlib Figure, got {type(fig).__name__}")
    path = Path(path)
    with rc_context(RC):
        fig.savefig(path, format="png", dpi=dpi)
    return path


# ============================================================================================
# Decimation: min / max / mean per time bucket, streamed
# ============================================================================================


class MinMaxDecimator:
    """Min, max and mean of named signals per time bucket, fed block by block.

    At most ``buckets`` buckets are kept. They start ``width`` seconds wide at the first sample
    fed; when a sample falls past the last bucket, neighbouring buckets are merged (the width
    doubles, as often as needed), so memory stays bounded and no span must be known ahead.
    Non-finite samples are left out. Samples must come in non-decreasing time order overall
    (each block's own samples may come in any order).
    """

    def __init__(self, names: Sequence[str], buckets: int = 800, width: float = 1e-3) -> None:
        if isinstance(names, str) or not names or not all(isinstance(n, str) and n for n in names):
            raise ValueError(f"names: expected a sequence of signal names, got {names!r}")
        if isinstance(buckets, bool) or not isinstance(buckets, int) or buckets < 2:
            raise ValueError(f"buckets: expected a whole number of at least 2, got {buckets!r}")
        if not (isinstance(width, (int, float)) and math.isfinite(width) and width > 0):
            raise ValueError(f"width: expected a positive time in s, got {width!r}")
        self.names = tuple(names)
        self.buckets = buckets
        self.width = float(width)
        self.origin: float | None = None
        self.samples = 0
        self._min = {n: np.full(buckets, np.inf) for n in self.names}
        self._max = {n: np.full(buckets, -np.inf) for n in self.names}
        self._sum = {n: np.zeros(buckets) for n in self.names}
        self._count = {n: np.zeros(buckets, np.int64) for n in self.names}
        self._used = 0  # buckets 0 .. _used - 1 have been reached

    def add(self, t: np.ndarray, columns: Mapping[str, np.ndarray]) -> None:
        """Add samples at times ``t`` (s); ``columns`` maps a name of `names` to values."""
        t = np.asarray(t, dtype=np.float64)
        if t.ndim != 1:
            raise ValueError(f"t: expected a 1-d array of times, got shape {t.shape}")
        for name, v in columns.items():
            if name not in self._min:
                raise ValueError(f"columns: {name!r} is not one of {', '.join(self.names)}")
            if np.shape(v) != t.shape:
                raise ValueError(f"columns: {name!r} has shape {np.shape(v)}, the times {t.shape}")
        if t.size == 0:
            return
        if not np.all(np.isfinite(t)):
            raise ValueError("t: times must be finite")
        if self.origin is None:
            self.origin = float(t.min())
        idx = np.floor((t - self.origin) / self.width).astype(np.int64)
        np.maximum(idx, 0, out=idx)
        top = int(idx.max())
        if top >= self.buckets:
            factor = 1 << int(math.ceil(math.log2((top + 1) / self.buckets)))
            while top // factor >= self.buckets:  # guard against rounding of log2
                factor <<= 1
            self._coarsen(factor)
            idx //= factor
        order = None
        if idx.size > 1 and np.any(idx[1:] < idx[:-1]):
            order = np.argsort(idx, kind="stable")
            idx = idx[order]
        starts = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
        where = idx[starts]
        for name, raw in columns.items():
            v = np.asarray(raw, dtype=np.float64)
            if order is not None:
                v = v[order]
            ok = np.isfinite(v)
            lo = np.minimum.reduceat(np.where(ok, v, np.inf), starts)
            hi = np.maximum.reduceat(np.where(ok, v, -np.inf), starts)
            self._min[name][where] = np.minimum(self._min[name][where], lo)
            self._max[name][where] = np.maximum(self._max[name][where], hi)
            self._sum[name][where] += np.add.reduceat(np.where(ok, v, 0.0), starts)
            self._count[name][where] += np.add.reduceat(ok.astype(np.int64), starts)
        self._used = max(self._used, int(where[-1]) + 1)
        self.samples += int(t.size)

    def _coarsen(self, factor: int) -> None:
        n = self.buckets
        m = -(-n // factor) * factor
        for store, fill, reduce in ((self._min, np.inf, np.min), (self._max, -np.inf, np.max),
                                    (self._sum, 0.0, np.sum), (self._count, 0, np.sum)):
            for name, arr in store.items():
                padded = np.full(m, fill, dtype=arr.dtype)
                padded[:n] = arr
                merged = reduce(padded.reshape(-1, factor), axis=1)
                out = np.full(n, fill, dtype=arr.dtype)
                out[: merged.size] = merged
                store[name] = out
        self.width *= factor
        self._used = -(-self._used // factor)

    def result(self) -> Trace:
        """The buckets reached so far (empty buckets hold NaN)."""
        k = self._used
        origin = 0.0 if self.origin is None else self.origin
        lo, hi, mean = {}, {}, {}
        for name in self.names:
            count = self._count[name][:k]
            empty = count == 0
            lo[name] = np.where(empty, np.nan, self._min[name][:k])
            hi[name] = np.where(empty, np.nan, self._max[name][:k])
            with np.errstate(invalid="ignore", divide="ignore"):
                mean[name] = np.where(empty, np.nan, self._sum[name][:k] / np.maximum(count, 1))
        edges = origin + self.width * np.arange(k + 1)
        return Trace(edges=edges, low=lo, high=hi, mean=mean, samples=self.samples, width=self.width)


@dataclass(frozen=True)
class Trace:
    """Decimated signals: bucket ``i`` spans ``edges[i]`` to ``edges[i + 1]`` (s)."""

    edges: np.ndarray
    low: Mapping[str, np.ndarray]
    high: Mapping[str, np.ndarray]
    mean: Mapping[str, np.ndarray]
    samples: int
    width: float

    @property
    def centres(self) -> np.ndarray:
        return 0.5 * (self.edges[:-1] + self.edges[1:])


@dataclass(frozen=True)
class DarkCapture:
    """A dark capture of the run: the samples between ``t_start`` and ``t_end`` (probe blocked),
    in effect from ``t_applied`` on."""

    t_start: float
    t_end: float
    t_applied: float
    probe: float  # V
    reference: float  # V


@dataclass(frozen=True)
class SignalData:
    trace: Trace
    darks: tuple[DarkCapture, ...]
    pump_on: tuple[tuple[float, float], ...] | None  # intervals with the pump output on; None: unknown
    blocks: int


def _sample_slice(block: Block, t0: float, t1: float) -> np.ndarray:
    t = block.times()
    return (t >= t0) & (t <= t1)


def dark_captures(reader: Any, events: Iterable[Event], source: str = "detector") -> list[DarkCapture]:
    """The run's successful dark captures, each averaged again from its stored samples."""
    out = []
    for ev in events:
        d = ev.data if isinstance(ev.data, Mapping) else {}
        if ev.kind != "procedure" or d.get("control") != "dark" or not d.get("ok", True):
            continue
        try:
            t0, t1 = float(d["t_start"]), float(d["t_end"])
        except (KeyError, TypeError, ValueError):
            continue
        p = _window_mean(reader, source, PROBE, t0, t1)
        r = _window_mean(reader, source, REFERENCE, t0, t1)
        if p is not None and r is not None:
            out.append(DarkCapture(t0, t1, float(ev.t), p, r))
    return out


def _window_mean(reader: Any, source: str, channel: str, t0: float, t1: float) -> float | None:
    total, n = 0.0, 0
    for block in reader.iter_blocks(source=source, start=t0, stop=t1 + 1e-9):
        if channel in block.channels:
            sel = _sample_slice(block, t0, t1)
            total += float(block.column(channel)[sel].sum())
            n += int(sel.sum())
    return total / n if n else None


def reference_level(reader: Any, events: Iterable[Event], source: str = "detector") -> float | None:
    """Mean reference voltage (V, dark not subtracted) during the run's first baseline capture."""
    for ev in events:
        d = ev.data if isinstance(ev.data, Mapping) else {}
        if ev.kind == "procedure" and d.get("control") == "baseline" and d.get("ok", True):
            try:
                return _window_mean(reader, source, REFERENCE, float(d["t_start"]), float(d["t_end"]))
            except (KeyError, TypeError, ValueError):
                continue
    return None


#: S is drawn only where the dark-corrected reference is above this fraction of its level during
#: the baseline capture (a blocked or closing beam gives a ratio of noise over noise).
MIN_REFERENCE_FRACTION = 0.1


def signal_trace(reader: Any, events: Sequence[Event], *, buckets: int = 800, source: str = "detector",
                 duration: float | None = None) -> SignalData:
    """Stream the run's detector blocks once into `MinMaxDecimator` (probe, reference, S, pump
    monitor) and read the pump output's on/off intervals from the pump's blocks.

    ``S = (V_probe - dark_p) / (V_ref - dark_r)`` with the dark in effect at each block (the
    run's first dark for blocks before it; zero without one); samples inside a dark capture, or
    where ``V_ref - dark_r`` is below `MIN_REFERENCE_FRACTION` of its level during the baseline
    capture (or not positive, without a baseline), have no S.
    """
    darks = dark_captures(reader, events, source)
    level = reference_level(reader, events, source)
    # the run clock starts with the run, so its samples fit in the run's duration (5 % spare)
    width = (1.05 * duration / buckets) if duration and duration > 0 else 1e-3
    dec = MinMaxDecimator([n for n, _ in SIGNAL_PANELS], buckets=buckets, width=width)
    windows = [(d.t_start, d.t_end) for d in darks]
    n_blocks = 0
    for block in reader.iter_blocks(source=source):
        if PROBE not in block.channels or REFERENCE not in block.channels or block.n == 0:
            continue
        n_blocks += 1
        t = block.times()
        vp, vr = block.column(PROBE), block.column(REFERENCE)
        dark = None
        for d in darks:
            if d.t_applied <= block.t0:
                dark = d
        if dark is None and darks:
            dark = darks[0]
        dp, dr = (dark.probe, dark.reference) if dark is not None else (0.0, 0.0)
        den = vr - dr
        floor = MIN_REFERENCE_FRACTION * (level - dr) if level is not None and level > dr else 0.0
        good = den > floor
        with np.errstate(invalid="ignore", divide="ignore"):
            s = np.where(good, (vp - dp) / np.where(good, den, 1.0), np.nan)
        for a, b in windows:
            if block.t0 <= b and block.t_end >= a:
                s[(t >= a) & (t <= b)] = np.nan
        cols = {PROBE: vp, REFERENCE: vr, "S": s}
        if PUMP_MONITOR in block.channels:
            cols[PUMP_MONITOR] = block.column(PUMP_MONITOR)
        dec.add(t, cols)
    return SignalData(dec.result(), tuple(darks), pump_intervals(reader), n_blocks)


def pump_intervals(reader: Any, source: str = "pump") -> tuple[tuple[float, float], ...] | None:
    """Intervals (s) in which the pump driver reported its output on (its ``pump_on`` channel)."""
    out: list[tuple[float, float]] = []
    seen = False
    on_since: float | None = None
    last_t = None
    for block in reader.iter_blocks(source=source):
        if PUMP_ON not in block.channels or block.n == 0:
            continue
        seen = True
        t, v = block.times(), block.column(PUMP_ON) > 0.5
        before = np.r_[on_since is not None, v[:-1]]  # the state before each sample
        for i in np.flatnonzero(v != before):
            if v[i]:
                on_since = float(t[i])
            else:
                out.append((on_since, float(t[i])))
                on_since = None
        last_t = float(t[-1])
    if not seen:
        return None
    if on_since is not None and last_t is not None:
        out.append((on_since, last_t))
    return tuple(out)


# ============================================================================================
# Figures
# ============================================================================================


def _shade_pump(ax, intervals) -> None:
    for a, b in intervals or ():
        ax.axvspan(a, b, color=GREY, alpha=0.18, lw=0)


def _robust_limits(lo: np.ndarray, hi: np.ndarray) -> tuple[float, float] | None:
    vals = np.concatenate([lo[np.isfinite(lo)], hi[np.isfinite(hi)]])
    if vals.size == 0:
        return None
    a, b = np.percentile(vals, [0.5, 99.5])
    if not b > a:
        a, b = a - 0.5 * max(abs(a), 1e-3), b + 0.5 * max(abs(b), 1e-3)
    pad = 0.08 * (b - a)
    return float(a - pad), float(b + pad)


def signals_figure(data: SignalData, *, title: str) -> Figure | None:
    """Probe, reference, S and pump monitor versus time: min-max band and mean per bucket."""
    trace = data.trace
    if trace.samples == 0 or trace.edges.size < 2:
        return None
    panels = [(n, lab) for n, lab in SIGNAL_PANELS if np.isfinite(trace.mean[n]).any()]
    colours = {PROBE: BLUE, REFERENCE: ORANGE, "S": GREEN, PUMP_MONITOR: VERMILLION}
    with rc_context(RC):
        fig = _figure(10, 2.0 + 1.75 * len(panels))
        axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
        x = trace.edges
        c = trace.centres
        bucket = _duration_text(trace.width)
        for ax, (name, label) in zip(axes, panels):
            lo, hi, mean = trace.low[name], trace.high[name], trace.mean[name]
            col = colours[name]
            _shade_pump(ax, data.pump_on)
            ax.fill_between(x, np.r_[lo, lo[-1]], np.r_[hi, hi[-1]], step="post", color=col, alpha=0.35, lw=0)
            ax.plot(c, mean, color=col, lw=1.0)
            ax.set_ylabel(label)
            if name == "S":
                lim = _robust_limits(lo, hi)
                if lim is not None:
                    ax.set_ylim(*lim)
                for d in data.darks:
                    ax.axvspan(d.t_start, d.t_end, facecolor="none", edgecolor=BLACK, hatch="..", lw=0.5)
        axes[-1].set_xlabel("run time t (s)")
        handles = [Patch(facecolor=GREY, alpha=0.18, label="pump output on (driver)"),
                   Patch(facecolor=GREY, alpha=0.6, label=f"min to max per {bucket} bucket"),
                   Line2D([], [], color=GREY, lw=1.0, label="mean per bucket")]
        if data.darks:
            handles.append(Patch(facecolor="none", edgecolor=BLACK, hatch="..", lw=0.5,
                                 label="dark capture (probe blocked, no S)"))
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles), frameon=False)
        note = "" if data.pump_on is not None else " (pump output state not recorded)"
        fig.suptitle(f"Signals of run {plain(title)}: {trace.samples:,} samples in {trace.edges.size - 1} "
                     f"buckets{note}")
    return fig


def _duration_text(seconds: float) -> str:
    if seconds >= 1:
        return f"{seconds:.3g} s"
    if seconds >= 1e-3:
        return f"{seconds * 1e3:.3g} ms"
    return f"{seconds * 1e6:.3g} µs"


def _thin(items: list, limit: int) -> list:
    if len(items) <= limit:
        return items
    step = -(-len(items) // limit)
    kept = items[::step]
    if kept[-1] is not items[-1]:
        kept.append(items[-1])
    return kept


def truth_series(truth: Sequence[Mapping[str, Any]], sigma_a: float) -> dict[str, np.ndarray]:
    """The simulator's truth over time: beta and gain (dB), NaN where the pump was off.

    The gain is the medium's own single-pass transmission where the rows hold it, else (older
    runs) the net gain of the true ln R."""
    rows = [r for r in truth if isinstance(r.get("t"), (int, float))]
    t = np.array([float(r["t"]) for r in rows])
    pump = np.array([float(r.get("pump_w", 1.0)) for r in rows])
    on = pump > 0
    beta = np.array([float(r.get("beta", np.nan)) for r in rows])
    gain = np.full(t.size, np.nan)
    for i, r in enumerate(rows):
        try:
            if "ln_t_pumped" in r:  # the medium's own probe transmission (newer runs)
                gain[i] = float(physics.ln_gain_to_db(float(r["ln_t_pumped"])))
                continue
            g = physics.net_gain(float(r["ln_ratio"]), sigma_a, float(r["n_total"]), float(r["length"]))
            gain[i] = float(physics.gain_db(g))
        except (KeyError, TypeError, ValueError):
            pass
    return {"t": t, "beta": np.where(on, beta, np.nan), "gain_db": np.where(on, gain, np.nan)}


ESTIMATE_PANELS = (("beta", "excited fraction β", 1.0), ("gain_db", "single-pass net gain (dB)", 1.0))
#: Drawn instead when no estimate has beta or gain (a probe-wavelength sweep without a spectrum).
LN_RATIO_PANEL = ("ln_ratio", "ln R", 1.0)


def estimates_figure(series: Sequence[tuple[str, Sequence[Estimate]]], truth: Mapping[str, np.ndarray] | None,
                     *, title: str, trips: Sequence[float] = (), limit: int = 3000) -> Figure | None:
    """Cumulative beta and gain with their ±2σ bands, window estimates as points, truth markers.

    The value axis spans the estimates and their bands; a truth sample far outside (the truth is
    sampled at instants, and may catch the pump's rise) is counted in the corner, not drawn.
    """
    def present(key: str) -> bool:
        return any(key in e.values for _, ests in series for e in ests)

    panels = [p for p in ESTIMATE_PANELS if present(p[0])] or ([LN_RATIO_PANEL] if present("ln_ratio") else [])
    if not panels:
        return None
    single = len(series) == 1
    with rc_context(RC):
        fig = _figure(10, 2.2 + 2.4 * len(panels))
        axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
        for ax, (key, label, scale) in zip(axes, panels):
            spans: list[np.ndarray] = []
            for i, (name, ests) in enumerate(series):
                colour, ls, marker, hatch = SERIES_STYLES[i % len(SERIES_STYLES)]
                prefix = "" if single else f"{name}: "
                cum = _thin([e for e in ests if e.scope == "cumulative" and key in e.values], limit)
                win = _thin([e for e in ests if e.scope == "window" and key in e.values], limit)
                if cum:
                    t = np.array([e.t for e in cum])
                    v = np.array([e.values[key].value for e in cum]) * scale
                    s = np.array([e.values[key].sigma for e in cum]) * scale
                    ax.fill_between(t, v - 2 * s, v + 2 * s, facecolor=colour, alpha=0.18, hatch=hatch,
                                    edgecolor=colour, lw=0, label=f"{prefix}cumulative ±2σ (combined)")
                    ax.plot(t, v, color=colour, ls=ls, lw=1.6, label=f"{prefix}cumulative estimate")
                    spans += [v - 2 * s, v + 2 * s]
                if win:
                    t = np.array([e.t for e in win])
                    v = np.array([e.values[key].value for e in win]) * scale
                    s = np.array([e.values[key].sigma_noise for e in win]) * scale
                    ax.errorbar(t, v, yerr=2 * s, fmt=marker, ms=3.5, color=colour, mfc="white", lw=0.8,
                                capsize=0, label=f"{prefix}window estimates (±2σ noise)")
                    spans += [v - 2 * s, v + 2 * s]
            vals = np.concatenate(spans) if spans else np.array([])
            vals = vals[np.isfinite(vals)]
            lo = hi = None
            if vals.size:
                lo, hi = float(vals.min()), float(vals.max())
                pad = 0.15 * (hi - lo) if hi > lo else 0.05 * max(abs(hi), 1e-6)
                lo, hi = lo - pad, hi + pad
                ax.set_ylim(lo, hi)
            if truth is not None and key in truth and np.isfinite(truth[key]).any():
                tv = truth[key] * scale
                inside = np.isfinite(tv) if lo is None else np.isfinite(tv) & (tv >= lo) & (tv <= hi)
                ax.plot(truth["t"][inside], tv[inside], "x", color=BLACK, ms=6, mew=1.4,
                        label="simulator truth (instantaneous, pump on)")
                outside = int((np.isfinite(tv) & ~inside).sum())
                if outside:
                    ax.text(0.99, 0.03, f"{outside} truth sample{'s' if outside > 1 else ''} outside this range",
                            transform=ax.transAxes, ha="right", va="bottom", fontsize=8.5)
            for k, t in enumerate(trips):
                ax.axvline(t, color=VERMILLION, ls="--", lw=1.0, label="guard trip (pump off)" if k == 0 else None)
            ax.set_ylabel(label)
        axes[-1].set_xlabel("run time t (s)")
        handles, labels = axes[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside lower center", ncols=3 if single else 2, frameon=False)
        fig.suptitle(f"Estimates over time, run {plain(title)}")
    return fig


def decay_figure(estimate: Estimate | None, *, title: str) -> Figure | None:
    """The lifetime fit: binned ln R(t) after the pump switches off, the fitted exponential,
    and the residuals in units of their standard uncertainty."""
    if estimate is None:
        return None
    curve = estimate.extra.get("curve") if isinstance(estimate.extra, Mapping) else None
    fit = estimate.extra.get("fit") if isinstance(estimate.extra, Mapping) else None
    if not isinstance(curve, Mapping) or not curve.get("t_s"):
        return None
    t = np.asarray(curve["t_s"], float) * 1e3
    y = np.asarray(curve["ln_ratio"], float)
    s = np.asarray(curve["sigma"], float)
    model = np.asarray(curve["fit"], float)
    with np.errstate(invalid="ignore", divide="ignore"):
        resid = np.where(s > 0, (y - model) / s, np.nan)
    with rc_context(RC):
        fig = _figure(9, 6.5)
        top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3, 1.3])
        top.errorbar(t, y, yerr=s, fmt="o", ms=3.5, color=BLUE, mfc="white", lw=0.8, capsize=0,
                     label="binned mean of the decays (±1σ)")
        label = "fit: ln R(t) = ln R(0) exp(−t / τ_d)"
        if isinstance(fit, Mapping) and "tau" in fit:
            label += (f"\nln R(0) = {_pm(fit['amplitude'], fit['amplitude_sigma'])}, "
                      f"τ_d = {_pm(fit['tau'] * 1e3, fit['tau_sigma'] * 1e3)} ms, "
                      f"χ²/dof = {fit['chi2_reduced']:.2f} ({fit.get('dof', '?')} dof)")
        top.plot(t, model, color=VERMILLION, ls="--", lw=1.8, label=label)
        top.set_ylabel("ln R(t)")
        tau = estimate.values.get("tau_s")
        n = estimate.extra.get("n_decays", "?")
        sub = f"{n} decays averaged"
        if tau is not None:
            sub += f"; lifetime after the probe correction τ = {_pm(tau.value * 1e3, tau.sigma * 1e3)} ms"
        top.set_title(sub)
        bottom.axhline(0.0, color=BLACK, lw=0.8)
        for k in (-2, 2):
            bottom.axhline(k, color=GREY, lw=0.8, ls=":")
        bottom.plot(t, resid, "o", ms=3.5, color=BLUE, mfc="white")
        bottom.set_ylabel("residual / σ")
        bottom.set_xlabel("time after the pump switched off (ms)")
        fig.legend(*top.get_legend_handles_labels(), loc="outside lower center", ncols=2, frameon=False)
        fig.suptitle(f"Lifetime fit, run {plain(title)}")
    return fig


def _pm(value: float, sigma: float) -> str:
    """``value ± sigma`` with two significant digits of sigma."""
    try:
        value, sigma = float(value), float(sigma)
    except (TypeError, ValueError):
        return f"{value} ± {sigma}"
    if not (math.isfinite(sigma) and sigma > 0 and math.isfinite(value)):
        return f"{value:.6g}"
    decimals = max(0, 1 - int(math.floor(math.log10(sigma))))
    if decimals > 12 or abs(value) >= 1e5:
        return f"{value:.4g} ± {sigma:.2g}"
    return f"{value:.{decimals}f} ± {sigma:.{decimals}f}"


def _truth_per_power(truth: Sequence[Mapping[str, Any]]) -> list[tuple[float, float]]:
    groups: dict[float, list[float]] = {}
    for r in truth:
        p, b = r.get("pump_w"), r.get("beta")
        if isinstance(p, (int, float)) and isinstance(b, (int, float)) and p > 0:
            groups.setdefault(round(float(p), 9), []).append(float(b))
    return sorted((p, float(np.mean(v))) for p, v in groups.items())


def saturation_figure(estimate: Estimate | None, truth: Sequence[Mapping[str, Any]] | None, *,
                      title: str) -> Figure | None:
    """beta versus pump power at each sweep step, with the fitted saturation curve."""
    if estimate is None or not isinstance(estimate.extra, Mapping):
        return None
    points = [p for p in estimate.extra.get("points") or () if isinstance(p, Mapping)
              and isinstance(p.get("pump_power_w"), (int, float)) and "beta" in p]
    fits = estimate.extra.get("fits") if isinstance(estimate.extra.get("fits"), Mapping) else {}
    step = estimate.extra.get("step") if isinstance(estimate.extra.get("step"), Mapping) else {}
    if points:
        wl0 = points[-1].get("probe_wavelength_m")
        points = [p for p in points if p.get("probe_wavelength_m") == wl0]
    open_power = step.get("pump_power_w")
    open_beta = estimate.values.get("beta")
    has_open = (isinstance(open_power, (int, float)) and open_beta is not None
                and all(p["pump_power_w"] != open_power for p in points))
    if not points and not has_open:
        return None
    with rc_context(RC):
        fig = _figure(9, 5.5)
        ax = fig.subplots()
        if points:
            x = np.array([p["pump_power_w"] for p in points])
            y = np.array([p["beta"] for p in points])
            s = np.array([p.get("beta_sigma_noise", 0.0) for p in points])
            ax.errorbar(x, y, yerr=s, fmt="o", ms=6, color=BLUE, capsize=3, lw=1.0,
                        label="closed steps (±1σ noise: the fit's weights)")
        if has_open:
            ax.errorbar([open_power], [open_beta.value], yerr=[open_beta.sigma_noise], fmt="s", ms=7, mfc="white",
                        color=ORANGE, capsize=3, label="last step, still open (not in the fit)")
        sat = fits.get("saturation")
        if isinstance(sat, Mapping) and isinstance(sat.get("curve"), Mapping):
            cx = np.asarray(sat["curve"]["pump_power_w"], float)
            cy = np.asarray(sat["curve"]["beta"], float)
            bm = _pm(sat["beta_max"], math.hypot(sat["beta_max_sigma_noise"], sat["beta_max_sigma_systematic"]))
            ps = _pm(sat["p_sat_w"], math.hypot(sat["p_sat_w_sigma_noise"], sat["p_sat_w_sigma_systematic"]))
            ax.plot(cx, cy, color=VERMILLION, ls="--", lw=1.8,
                    label=f"fit ({sat.get('model', '?')} sample): β_max = {bm}, P_sat = {ps} W, "
                          f"χ²/dof = {sat.get('chi2_reduced', float('nan')):.2f}")
        else:
            why = fits.get("saturation_error") or "needs closed steps at 3 or more pump powers"
            ax.plot([], [], " ", label=f"no saturation fit: {plain(why)}")
        if truth:
            tp = _truth_per_power(truth)
            if tp:
                ax.plot([p for p, _ in tp], [b for _, b in tp], "x", ms=8, mew=1.6, color=BLACK,
                        label="simulator truth (per pump power)")
        rel = None
        if open_beta is not None and open_beta.value:
            rel = open_beta.sigma_systematic / abs(open_beta.value)
        ax.set_xlabel("pump power P (W, from the current calibration)")
        ax.set_ylabel("excited fraction β")
        ax.set_xlim(left=0)
        ax.set_ylim(bottom=0)
        fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=2, frameon=False)
        sub = "" if rel is None else f" (every β also carries a common {rel * 100:.2g} % scale uncertainty)"
        ax.set_title(f"Pump saturation{sub}")
        fig.suptitle(f"Pump-power sweep, run {plain(title)}")
    return fig


def spectrum_curve(spec: Mapping[str, Any], wavelengths: np.ndarray) -> np.ndarray:
    """The fitted Voigt line of a sweep's ``fits["spectrum"]`` at ``wavelengths`` (m), per metre.

    The fit stores full widths; the line's parameters are ``sigma = FWHM_G / (2 sqrt(2 ln 2))``
    (Gaussian) and ``gamma = FWHM_L / 2`` (Lorentzian half width), in optical frequency.
    """
    lam = np.asarray(wavelengths, dtype=np.float64)
    if lam.size == 0 or not np.all(lam > 0):
        raise ValueError("wavelengths: expected positive wavelengths in m")
    sg = float(spec["gaussian_fwhm_hz"]) / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gl = float(spec["lorentzian_fwhm_hz"]) / 2.0
    return fitting.voigt_line(constants.c / lam, float(spec["peak_gain_change_per_m"]), float(spec["centre_hz"]),
                              sg, gl)


def spectrum_figure(estimate: Estimate | None, *, title: str) -> Figure | None:
    """The gain change at each probe wavelength, with the fitted Voigt line."""
    if estimate is None or not isinstance(estimate.extra, Mapping):
        return None
    points = [p for p in estimate.extra.get("points") or () if isinstance(p, Mapping)
              and isinstance(p.get("probe_wavelength_m"), (int, float)) and "gain_change_per_m" in p]
    if len({p["probe_wavelength_m"] for p in points}) < 2:
        return None
    fits = estimate.extra.get("fits") if isinstance(estimate.extra.get("fits"), Mapping) else {}
    lam = np.array([p["probe_wavelength_m"] for p in points])
    y = np.array([p["gain_change_per_m"] for p in points]) / 100.0
    s = np.array([p.get("gain_change_per_m_sigma", 0.0) for p in points]) / 100.0
    with rc_context(RC):
        fig = _figure(9, 5.5)
        ax = fig.subplots()
        ax.errorbar(lam * 1e9, y, yerr=s, fmt="o", ms=6, color=BLUE, capsize=3, lw=1.0,
                    label="measured steps (±1σ noise)")
        spec = fits.get("spectrum")
        if isinstance(spec, Mapping):
            span = lam.max() - lam.min()
            grid = np.linspace(lam.min() - 0.05 * span, lam.max() + 0.05 * span, 400)
            curve = spectrum_curve(spec, grid)
            centre = _pm(spec["centre_m"] * 1e9, spec["centre_m_sigma"] * 1e9)
            ax.plot(grid * 1e9, curve / 100.0, color=VERMILLION, ls="--", lw=1.8,
                    label=f"Voigt fit: centre {centre} nm, FWHM {spec['voigt_fwhm_hz'] / 1e12:.3g} THz, "
                          f"χ²/dof = {spec.get('chi2_reduced', float('nan')):.2f}")
            ax.axvline(spec["centre_m"] * 1e9, color=GREY, ls=":", lw=1.0)
        else:
            why = fits.get("spectrum_error") or "needs 5 or more probe wavelengths"
            ax.plot([], [], " ", label=f"no line fit: {plain(why)}")
        mc = fits.get("mccumber")
        if isinstance(mc, Mapping) and "consistent" in mc:
            verdict = "consistent" if mc["consistent"] else "NOT consistent"
            ax.plot([], [], " ", label=f"McCumber check against the configured spectrum: {verdict}")
        ax.axhline(0.0, color=BLACK, lw=0.6)
        ax.set_xlabel("probe wavelength λ (nm)")
        ax.set_ylabel("pump-induced gain change ln R / L (cm⁻¹)")
        fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=1, frameon=False)
        fig.suptitle(f"Gain spectrum, run {plain(title)}")
    return fig


#: Timeline rows: (label, event kinds, marker, colour).
TIMELINE_ROWS = (
    ("guard requests", ("guard",), "o", BLUE),
    ("trips", ("trip",), "v", VERMILLION),
    ("faults", ("fault",), "D", ORANGE),
    ("drops / gaps", ("drop", "gap"), "s", PURPLE),
    ("notes", ("note",), "*", BLACK),
    ("settings", ("setting",), "^", GREEN),
    ("dark / baseline", ("procedure",), "P", SKY_BLUE),
    ("checklist", ("checklist",), "o", GREY),
    ("run start / stop", ("run",), ">", BLACK),
)


#: Trips labelled with their latency on the timeline (the page's table lists all of them).
MAX_TRIP_LABELS = 8


def guard_segments(events: Sequence[Event], t_end: float) -> list[tuple[float, float, str]]:
    """(start, end, state) of the guard from its accepted transitions ("safe" before the first)."""
    changes = []
    for ev in events:
        d = ev.data if isinstance(ev.data, Mapping) else {}
        if ev.kind in ("guard", "trip") and d.get("accepted", True) and d.get("to") in STATE_STYLES:
            changes.append((float(ev.t), str(d["to"])))
    out = []
    state, since = "safe", 0.0
    for t, to in changes:
        if to != state:
            if t > since:
                out.append((since, t, state))
            state, since = to, t
    if t_end > since:
        out.append((since, t_end, state))
    return out


def timeline_figure(events: Sequence[Event], t_end: float, trips: Sequence[Mapping[str, Any]], *,
                    title: str) -> Figure:
    """Events on the time axis, one row per kind, with the guard's state as a band on top."""
    rows = [r for r in TIMELINE_ROWS if r[0] in ("guard requests", "trips")
            or any(e.kind in r[1] for e in events)]
    t_end = max([t_end, *(e.t for e in events)] or [1.0])
    with rc_context(RC):
        fig = _figure(10, 1.6 + 0.42 * (len(rows) + 1))
        ax = fig.subplots()
        n = len(rows)
        band_y = n  # the top row
        for a, b, state in guard_segments(events, t_end):
            colour, hatch = STATE_STYLES[state]
            ax.broken_barh([(a, b - a)], (band_y - 0.35, 0.7), facecolors=colour, edgecolor=BLACK, hatch=hatch,
                           lw=0.6, alpha=0.9)
            if (b - a) > 0.06 * t_end:
                ax.text(0.5 * (a + b), band_y, state, ha="center", va="center", fontsize=8.5,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85})
        for k, (label, kinds, marker, colour) in enumerate(rows):
            y = n - 1 - k
            evs = [e for e in events if e.kind in kinds]
            if label == "guard requests":
                acc = [e.t for e in evs if (e.data or {}).get("accepted", True)]
                ref = [e.t for e in evs if not (e.data or {}).get("accepted", True)]
                ax.plot(acc, [y] * len(acc), marker, ls="none", color=colour, ms=6, mfc="white",
                        label="guard transition")
                if ref:
                    ax.plot(ref, [y] * len(ref), "x", ls="none", color=VERMILLION, ms=7, mew=1.5,
                            label="refused request")
            else:
                ts = [e.t for e in evs]
                ax.plot(ts, [y] * len(ts), marker, ls="none", color=colour, ms=7, mfc=colour if marker != "o"
                        else "white")
        trip_row = n - 2  # rows[1] is the trips row
        for k, tr in enumerate(trips):
            t = float(tr["t"])
            lat = tr.get("latency_s")
            ax.axvline(t, color=VERMILLION, ls="--", lw=1.0)
            if k >= MAX_TRIP_LABELS:
                continue
            text = f"trip {k + 1}" + (f", latency {lat * 1e3:.1f} ms" if isinstance(lat, (int, float)) else "")
            # alternate above and below the row, so that close trips stay readable
            dy = 0.3 if k % 2 == 0 else -0.3
            ax.annotate(plain(text), (t, trip_row + dy), xytext=(4, 0), textcoords="offset points", fontsize=8.5,
                        va="center", color=BLACK,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": VERMILLION})
        ax.set_yticks(list(range(n + 1)), [*(r[0] for r in reversed(rows)), "guard state"])
        ax.set_ylim(-0.7, n + 0.7)
        ax.set_xlim(0, t_end * 1.02)
        ax.set_xlabel("run time t (s)")
        handles = [_state_patch(s) for s in STATE_STYLES]
        ax.legend(handles=handles + ax.get_legend_handles_labels()[0], loc="upper center",
                  bbox_to_anchor=(0.5, -0.22), ncols=6, framealpha=0.9)
        fig.suptitle(f"Events of run {plain(title)}")
    return fig


def _state_patch(state: str) -> Patch:
    colour, hatch = STATE_STYLES[state]
    return Patch(facecolor=colour, edgecolor=BLACK, hatch=hatch, label=f"guard {state}")
