"""The shots of a pulsed run: the mean gain transient ln R(t) after the trigger with its band,
and each shot's peak ln R and decay time against the run's time. Plain data in, a Figure (or
None) out."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from matplotlib import rc_context
from matplotlib.figure import Figure

from bench.records import Estimate
from bench.report.figure_style import BLUE, GREY, RC, VERMILLION, new_figure, plain


def _pulsed(estimate: Estimate | None) -> Mapping | None:
    if estimate is None or estimate.mode != "pulsed" or not isinstance(estimate.extra, Mapping):
        return None
    transient = estimate.extra.get("transient")
    if not isinstance(transient, Mapping) or len(transient.get("t_s") or ()) < 2:
        return None
    return estimate.extra


def pulse_figure(estimate: Estimate | None, *, title: str) -> Figure | None:
    """Top: the mean ln R(t) over the shots (band: ±2σ of the mean, from the shots' scatter) with
    the pump pulse marked; bottom: each shot's peak ln R and its decay time."""
    extra = _pulsed(estimate)
    if extra is None:
        return None
    tr = extra["transient"]
    t = np.asarray(tr["t_s"], dtype=float) * 1e3
    v = np.asarray(tr["ln_ratio"], dtype=float)
    s = np.asarray(tr["sigma"], dtype=float)
    shots = [p for p in extra.get("per_shot") or [] if isinstance(p, Mapping)]
    with rc_context(RC):
        fig = new_figure(9, 8)
        top, bottom = fig.subplots(2, 1)
        top.fill_between(t, v - 2 * s, v + 2 * s, color=BLUE, alpha=0.25, lw=0, label="±2σ of the mean")
        top.plot(
            t, v, "-", color=BLUE, lw=1.2, label=f"mean ln R(t) over {len(shots) or extra.get('shots')} shots"
        )
        width = extra.get("pulse_width_s")
        if isinstance(width, (int, float)) and width > 0:
            top.axvspan(0.0, width * 1e3, color=GREY, alpha=0.15, lw=0, label="pump pulse")
        top.axhline(0.0, color=GREY, lw=0.6)
        top.set_xlabel("time after the trigger (ms)")
        top.set_ylabel("ln R")
        top.legend(loc="upper right", frameon=False, fontsize="small")
        if shots:
            ts = np.array([p.get("t", np.nan) for p in shots], dtype=float)
            peak = np.array([p.get("ln_ratio_peak", np.nan) for p in shots], dtype=float)
            decay = np.array([p.get("decay_time_s", np.nan) for p in shots], dtype=float) * 1e3
            bottom.plot(ts, peak, "o", color=BLUE, ms=3.5, label="peak ln R (left)")
            bottom.set_xlabel("run time t (s)")
            bottom.set_ylabel("peak ln R")
            right = bottom.twinx()
            right.plot(ts, decay, "^", color=VERMILLION, ms=3.5, label="decay time (right)")
            right.set_ylabel("decay time (ms)")
            handles = bottom.get_legend_handles_labels()[0] + right.get_legend_handles_labels()[0]
            bottom.legend(handles=handles, loc="lower right", frameon=False, fontsize="small")
        else:
            bottom.set_axis_off()
        fig.suptitle(f"Pulsed shots, run {plain(title)}", fontsize="medium")
    return fig
