"""The events figure: every recorded event on the run's time axis, one row per kind, and the
guard's state from its accepted transitions.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from matplotlib import rc_context
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from bench.records import Event
from bench.report.figure_style import (
    BLACK,
    BLUE,
    GREEN,
    GREY,
    ORANGE,
    PURPLE,
    RC,
    SKY_BLUE,
    STATE_STYLES,
    VERMILLION,
    new_figure,
    plain,
)

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


def timeline_figure(
    events: Sequence[Event], t_end: float, trips: Sequence[Mapping[str, Any]], *, title: str
) -> Figure:
    """Events on the time axis, one row per kind, with the guard's state as a band on top."""
    rows = [
        r for r in TIMELINE_ROWS if r[0] in ("guard requests", "trips") or any(e.kind in r[1] for e in events)
    ]
    t_end = max([t_end, *(e.t for e in events)] or [1.0])
    with rc_context(RC):
        fig = new_figure(10, 1.6 + 0.42 * (len(rows) + 1))
        ax = fig.subplots()
        n = len(rows)
        band_y = n  # the top row
        for a, b, state in guard_segments(events, t_end):
            colour, hatch = STATE_STYLES[state]
            ax.broken_barh(
                [(a, b - a)],
                (band_y - 0.35, 0.7),
                facecolors=colour,
                edgecolor=BLACK,
                hatch=hatch,
                lw=0.6,
                alpha=0.9,
            )
            if (b - a) > 0.06 * t_end:
                ax.text(
                    0.5 * (a + b),
                    band_y,
                    state,
                    ha="center",
                    va="center",
                    fontsize=8.5,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85},
                )
        for k, (label, kinds, marker, colour) in enumerate(rows):
            y = n - 1 - k
            evs = [e for e in events if e.kind in kinds]
            if label == "guard requests":
                acc = [e.t for e in evs if (e.data or {}).get("accepted", True)]
                ref = [e.t for e in evs if not (e.data or {}).get("accepted", True)]
                ax.plot(
                    acc,
                    [y] * len(acc),
                    marker,
                    ls="none",
                    color=colour,
                    ms=6,
                    mfc="white",
                    label="guard transition",
                )
                if ref:
                    ax.plot(
                        ref,
                        [y] * len(ref),
                        "x",
                        ls="none",
                        color=VERMILLION,
                        ms=7,
                        mew=1.5,
                        label="refused request",
                    )
            else:
                ts = [e.t for e in evs]
                ax.plot(
                    ts,
                    [y] * len(ts),
                    marker,
                    ls="none",
                    color=colour,
                    ms=7,
                    mfc=colour if marker != "o" else "white",
                )
        trip_row = n - 2  # rows[1] is the trips row
        for k, tr in enumerate(trips):
            t = float(tr["t"])
            lat = tr.get("latency_s")
            ax.axvline(t, color=VERMILLION, ls="--", lw=1.0)
            if k >= MAX_TRIP_LABELS:
                continue
            text = f"trip {k + 1}" + (
                f", latency {lat * 1e3:.1f} ms" if isinstance(lat, (int, float)) else ""
            )
            # alternate above and below the row, so that close trips stay readable
            dy = 0.3 if k % 2 == 0 else -0.3
            ax.annotate(
                plain(text),
                (t, trip_row + dy),
                xytext=(4, 0),
                textcoords="offset points",
                fontsize=8.5,
                va="center",
                color=BLACK,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": VERMILLION},
            )
        ax.set_yticks(list(range(n + 1)), [*(r[0] for r in reversed(rows)), "guard state"])
        ax.set_ylim(-0.7, n + 0.7)
        ax.set_xlim(0, t_end * 1.02)
        ax.set_xlabel("run time t (s)")
        handles = [_state_patch(s) for s in STATE_STYLES]
        ax.legend(
            handles=handles + ax.get_legend_handles_labels()[0],
            loc="upper center",
            bbox_to_anchor=(0.5, -0.22),
            ncols=6,
            framealpha=0.9,
        )
        fig.suptitle(f"Events of run {plain(title)}")
    return fig


def _state_patch(state: str) -> Patch:
    colour, hatch = STATE_STYLES[state]
    return Patch(facecolor=colour, edgecolor=BLACK, hatch=hatch, label=f"guard {state}")
