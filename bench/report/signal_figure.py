"""The signals figure: probe, reference, S and the pump monitor over the whole run, decimated
(`bench.report.signal_data`), with the pump's on intervals shaded.
"""

from __future__ import annotations

import numpy as np
from matplotlib import rc_context
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from bench.records import PROBE, PUMP_MONITOR, REFERENCE
from bench.report.figure_style import BLACK, BLUE, GREEN, GREY, ORANGE, RC, VERMILLION, new_figure, plain
from bench.report.signal_data import SIGNAL_PANELS, SignalData


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
        fig = new_figure(10, 2.0 + 1.75 * len(panels))
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
        handles = [
            Patch(facecolor=GREY, alpha=0.18, label="pump output on (driver)"),
            Patch(facecolor=GREY, alpha=0.6, label=f"min to max per {bucket} bucket"),
            Line2D([], [], color=GREY, lw=1.0, label="mean per bucket"),
        ]
        if data.darks:
            handles.append(
                Patch(
                    facecolor="none",
                    edgecolor=BLACK,
                    hatch="..",
                    lw=0.5,
                    label="dark capture (probe blocked, no S)",
                )
            )
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles), frameon=False)
        note = "" if data.pump_on is not None else " (pump output state not recorded)"
        fig.suptitle(
            f"Signals of run {plain(title)}: {trace.samples:,} samples in {trace.edges.size - 1} "
            f"buckets{note}"
        )
    return fig


def _duration_text(seconds: float) -> str:
    if seconds >= 1:
        return f"{seconds:.3g} s"
    if seconds >= 1e-3:
        return f"{seconds * 1e3:.3g} ms"
    return f"{seconds * 1e6:.3g} µs"
