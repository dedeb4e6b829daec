"""The dashboard's plots (textual-plotext): signals, the pump's effect, and the estimates' trend.

- `SignalsPlot`: probe and reference (V) over the last ``span`` seconds.
- `ResponsePlot`: the normalised transmission S with the pump-on stretches marked by a bar
  along the top (shape and legend, not colour alone); in decay mode the mean transient
  ln R(t) after the pump switches off with its exponential fit, and in sweep mode the step
  points β(P) with the fitted saturation curve, when the estimate carries them.
- `TrendPlot`: one estimate figure (gain in dB, or β) over time with its ±2σ band.

Each plot redraws only when its snapshot is newer than the one drawn. Traces are reduced to
about two points per braille column before plotting, so a drawing costs the same however fast
the digitiser runs.
"""

from __future__ import annotations

import math
import time

import numpy as np
from textual.reactive import reactive
from textual_plotext import PlotextPlot

from bench.estimator.params import FALLBACK_PUMP_THRESHOLD_V
from bench.run.consumer import Snapshot

#: Colours (plotext names); each series also has its own legend entry or marker.
PROBE_COLOUR = "cyan"
REFERENCE_COLOUR = "orange"
S_COLOUR = "white"
PUMP_COLOUR = "red"
BAND_COLOUR = "gray"


def reduce_points(x: np.ndarray, y: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """At most about ``n`` points: means of equal runs of consecutive points (NaNs dropped)."""
    good = np.isfinite(x) & np.isfinite(y)
    x, y = x[good], y[good]
    if n < 1:
        raise ValueError(f"n: {n} is below 1")
    if x.size <= n:
        return x, y
    k = int(math.ceil(x.size / n))
    m = (x.size // k) * k
    return x[:m].reshape(-1, k).mean(axis=1), y[:m].reshape(-1, k).mean(axis=1)


class _SnapshotPlot(PlotextPlot):
    """A plot drawn from snapshots; subclasses implement ``draw``."""

    DEFAULT_CSS = """
    _SnapshotPlot { height: 1fr; min-height: 6; border: round $panel-lighten-2; }
    """

    #: Seconds of trace shown.
    span: reactive[float] = reactive(5.0)
    #: Least time between two drawings (s).
    MIN_INTERVAL = 0.25
    #: Share of one core this plot may spend drawing. plotext takes 10-60 ms of interpreter
    #: time per drawing, which the acquisition threads then wait for; a plot that costs more
    #: is drawn less often.
    CPU_SHARE = 0.04

    def __init__(self, title: str, **kwargs) -> None:
        super().__init__(**kwargs)
        self._title = title
        self._drawn_key: object = None
        self._drawn_at = -1e9
        self._snapshot: Snapshot | None = None
        self.cost = 0.0  # interpreter time (s) of the last drawing, measured in `render`
        self.drawings = 0

    def on_mount(self) -> None:
        self.border_title = self._title

    def data_key(self, snapshot: Snapshot) -> object:
        """What must change for a redraw to be worth it (the newest sample time, the mode)."""
        return (snapshot.t, snapshot.mode)

    @property
    def interval(self) -> float:
        """Time between drawings: at least ``MIN_INTERVAL``, and long enough to keep the
        drawing within ``CPU_SHARE`` of a core."""
        return max(self.MIN_INTERVAL, self.cost / self.CPU_SHARE)

    def wants(self, snapshot: Snapshot) -> bool:
        """Whether ``snapshot`` would change this plot, which is on screen and due."""
        if not self.display or time.monotonic() - self._drawn_at < self.interval:
            return False
        return self.data_key(snapshot) != self._drawn_key

    def render(self):
        t0 = time.thread_time()
        try:
            return super().render()
        finally:
            self.cost = time.thread_time() - t0
            self.drawings += 1

    def show(self, snapshot: Snapshot) -> bool:
        """Redraw from ``snapshot`` if it changes the plot; returns whether it did."""
        if not self.wants(snapshot):
            return False
        self._snapshot = snapshot
        self._drawn_key = self.data_key(snapshot)
        self._drawn_at = time.monotonic()
        self._redraw()
        return True

    def forget(self) -> None:
        """Redraw at the next snapshot whatever it holds (e.g. after being shown again)."""
        self._drawn_key = None
        self._drawn_at = -1e9

    def watch_span(self) -> None:
        if self._snapshot is not None:
            self._redraw()

    def _redraw(self) -> None:
        plt = self.plt
        plt.clear_data()
        plt.clear_figure()
        self.draw(self._snapshot)
        self.refresh()

    @property
    def points(self) -> int:
        """Two points per column: a braille cell is two dots wide."""
        return 2 * max(self.size.width, 20)

    def draw(self, snapshot: Snapshot) -> None:  # pragma: no cover - abstract
        raise NotImplementedError

    def recent(self, snapshot: Snapshot):
        """(t, mean columns by channel) of the trace's last ``span`` seconds, or None."""
        tv = snapshot.trace
        if tv is None or tv.t.size == 0:
            return None
        keep = tv.t >= tv.t[-1] - self.span
        return tv.t[keep], {c: tv.mean[keep, i] for i, c in enumerate(tv.channels)}

    def empty(self, text: str) -> None:
        self.plt.title(text)


class SignalsPlot(_SnapshotPlot):
    """Probe and reference voltages."""

    def __init__(self, **kwargs) -> None:
        super().__init__("signals (V) vs run time (s)", **kwargs)

    def draw(self, snapshot: Snapshot) -> None:
        got = self.recent(snapshot)
        if got is None:
            self.empty("waiting for detector data")
            return
        t, col = got
        plt = self.plt
        for name, colour in (("probe", PROBE_COLOUR), ("reference", REFERENCE_COLOUR)):
            x, y = reduce_points(t, col[name], self.points)
            if x.size:
                plt.plot(x, y, color=colour, marker="braille", label=name)


class ResponsePlot(_SnapshotPlot):
    """What the pump does to the probe: transmission, decay transient or sweep points."""

    def __init__(self, **kwargs) -> None:
        super().__init__("transmission S (▀ pump on)", **kwargs)

    def data_key(self, snapshot: Snapshot) -> object:
        e = snapshot.estimate
        if (
            snapshot.mode in ("decay", "sweep")
            and e is not None
            and ("curve" in e.extra or "points" in e.extra)
        ):
            return (snapshot.mode, e.t)
        return (snapshot.t, snapshot.mode)

    def draw(self, snapshot: Snapshot) -> None:
        extra = snapshot.estimate.extra if snapshot.estimate is not None else {}
        if snapshot.mode == "decay" and isinstance(extra.get("curve"), dict):
            self._decay(extra["curve"])
        elif snapshot.mode == "sweep" and extra.get("points"):
            self._sweep(extra["points"], extra.get("fits") or {})
        else:
            self._transmission(snapshot)

    def _transmission(self, snapshot: Snapshot) -> None:
        self.border_title = "transmission S (▀ pump on)"
        got = self.recent(snapshot)
        if got is None:
            self.empty("waiting for detector data")
            return
        t, col = got
        plt = self.plt
        x, s = reduce_points(t, col["transmission"], self.points)
        if not x.size:
            self.empty("no transmission yet")
            return
        plt.plot(x, s, color=S_COLOUR, marker="braille", label="S")
        mon = col["pump_monitor"]
        top = float(np.nanmax(mon)) if mon.size else 0.0
        if math.isfinite(top) and top > FALLBACK_PUMP_THRESHOLD_V:
            on = mon > 0.5 * top
            if on.any():
                lo, hi = float(np.min(s)), float(np.max(s))
                level = hi + 0.08 * max(hi - lo, 1e-6)
                xo, _ = reduce_points(t[on], np.ones(int(on.sum())), self.points)
                plt.scatter(xo, np.full(xo.size, level), color=PUMP_COLOUR, marker="▀", label="pump on")

    def _decay(self, curve: dict) -> None:
        self.border_title = "decay: ln R vs ms after pump off, fit"
        t = np.asarray(curve.get("t_s", []), dtype=float) * 1e3
        y = np.asarray(curve.get("ln_ratio", []), dtype=float)
        f = np.asarray(curve.get("fit", []), dtype=float)
        plt = self.plt
        if t.size and f.size == t.size:  # under the points
            plt.plot(t, f, color=PUMP_COLOUR, marker="braille", label="fit a·exp(−t/τ)")
        if t.size and y.size == t.size:
            plt.scatter(t, y, color=S_COLOUR, marker="•", label="mean ln R")

    def _sweep(self, points: list, fits: dict) -> None:
        self.border_title = "sweep: β vs pump power (W), fit"
        pts = [p for p in points if p.get("pump_power_w") is not None and p.get("beta") is not None]
        plt = self.plt
        curve = (fits.get("saturation") or {}).get("curve")
        if isinstance(curve, dict) and curve.get("pump_power_w"):  # under the points
            plt.plot(
                curve["pump_power_w"],
                curve["beta"],
                color=PUMP_COLOUR,
                marker="braille",
                label="saturation fit",
            )
        if pts:
            x = np.array([p["pump_power_w"] for p in pts], dtype=float)
            y = np.array([p["beta"] for p in pts], dtype=float)
            plt.scatter(x, y, color=S_COLOUR, marker="●", label="steps")


class TrendPlot(_SnapshotPlot):
    """One estimate key over time (``key``) with a ±2σ band."""

    MIN_INTERVAL = 1.0
    CPU_SHARE = 0.02

    key: reactive[str] = reactive("gain_db")

    LABELS = {"gain_db": "gain (dB)", "beta": "β excited fraction", "ln_ratio": "ln R", "tau_s": "τ (s)"}

    def __init__(self, key: str = "gain_db", **kwargs) -> None:
        super().__init__(f"{self.LABELS.get(key, key)} ±2σ", **kwargs)
        self.set_reactive(TrendPlot.key, key)

    def watch_key(self, key: str) -> None:
        self._title = f"{self.LABELS.get(key, key)} ±2σ"
        self.border_title = self._title
        if self._snapshot is not None:
            self._redraw()

    def data_key(self, snapshot: Snapshot) -> object:
        ev = snapshot.estimates
        return (self.key, None if ev is None or ev.t.size == 0 else (ev.t.size, float(ev.t[-1])))

    def draw(self, snapshot: Snapshot) -> None:
        ev = snapshot.estimates
        plt = self.plt
        if ev is None or ev.t.size == 0 or self.key not in ev.keys:
            self.empty("no estimate yet")
            return
        j = ev.keys.index(self.key)
        t, v, s = ev.t, ev.value[:, j], ev.sigma[:, j]
        good = np.isfinite(t) & np.isfinite(v)
        if not good.any():
            self.empty("no estimate yet")
            return
        t, v, s = t[good], v[good], np.where(np.isfinite(s[good]), s[good], 0.0)
        n = self.points
        x, lo = reduce_points(t, v - 2 * s, n)
        _, hi = reduce_points(t, v + 2 * s, n)
        _, mid = reduce_points(t, v, n)
        plt.plot(x, hi, color=BAND_COLOUR, marker="·", label="±2σ")
        plt.plot(x, lo, color=BAND_COLOUR, marker="·")
        plt.plot(x, mid, color=S_COLOUR, marker="braille", label=self.LABELS.get(self.key, self.key))
