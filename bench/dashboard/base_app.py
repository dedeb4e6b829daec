"""What the live and the replay dashboards share: the layout, the repaint timer, the panels.

A `set_interval` timer (``REFRESH_HZ``) asks the subclass for the latest `Snapshot`
(``read_snapshot``) and hands it to the panels; nothing waits for the pipeline, and the
pipeline never waits for the screen. Every tick repaints the cheap text (guard, pump, the
newest detector levels); a plot is redrawn every `PLOT_EVERY` ticks, taking turns, and the
other panels every `SLOW_EVERY`. ``call_after_refresh`` then notes when the newest readings
reached the screen (`ScreenLatency`).

Below ``COMPACT_SIZE`` cells the screen gets the class ``compact`` (see ``dashboard.tcss``):
two plots at a time, and key ``v`` swaps them for the other two.
"""

from __future__ import annotations

import gc
import math
from collections.abc import Callable
from dataclasses import replace

from textual.app import App, ComposeResult
from textual.containers import Container, Horizontal, Vertical
from textual.widgets import Footer

from bench.dashboard.banner import ActionLine, BenchBanner
from bench.dashboard.events_panel import EventsPanel
from bench.dashboard.figures_panel import FiguresPanel
from bench.dashboard.guard_panel import GuardPanel
from bench.dashboard.meters import ScreenLatency
from bench.dashboard.plots import ResponsePlot, SignalsPlot, TrendPlot, _SnapshotPlot
from bench.dashboard.pump_panel import PumpPanel
from bench.dashboard.run_panel import RunPanel
from bench.run.consumer import Snapshot

#: Repaints per second (the snapshot timer).
REFRESH_HZ = 30.0

#: One plot is redrawn every this many snapshots (5 plot drawings a second in all, each of the
#: four plots 1.25 times a second): drawing a plot costs 10-40 ms of the dashboard's process,
#: which would otherwise delay the next repaint of the figures.
PLOT_EVERY = 6

#: The run, figures, events and health panels are handed a snapshot after at least this many
#: (about 3 a second), never on a tick that draws a plot; the guard, the pump and the levels
#: every snapshot.
SLOW_EVERY = 10

#: Below this many columns or rows the layout is compact.
COMPACT_SIZE = (110, 32)


class DashboardBase(App):
    """The shared dashboard; subclasses implement ``read_snapshot`` and ``side_panels``."""

    CSS_PATH = "dashboard.tcss"
    TITLE = "gainbench"
    ENABLE_COMMAND_PALETTE = False

    def __init__(
        self,
        *,
        bench_name: str,
        simulated: bool,
        power_at: Callable[[float], float] | None = None,
        current_limit: float | None = None,
        replay_of: str = "",
        run_clock: Callable[[], float] | None = None,
        refresh_hz: float = REFRESH_HZ,
    ) -> None:
        super().__init__()
        if not (math.isfinite(refresh_hz) and 1.0 <= refresh_hz <= 60.0):
            raise ValueError(f"refresh_hz: {refresh_hz!r} is not between 1 and 60")
        self.bench_name = bench_name
        self.simulated = simulated
        self.power_at = power_at
        self.current_limit = current_limit
        self.replay_of = replay_of
        self.run_clock = run_clock
        self.refresh_hz = float(refresh_hz)
        self.latency = ScreenLatency()
        self.last_snapshot: Snapshot | None = None
        self.repaints = 0
        self.ticks = 0
        self._plot_turn = 0
        self._since_slow = SLOW_EVERY  # the slow panels on the first tick that draws no plot

    # -- layout ---------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield BenchBanner(id="banner")
        with Horizontal(id="status-row"):
            yield GuardPanel(id="guard")
            yield PumpPanel(self.power_at, id="pump")
            yield RunPanel(id="run")
        with Horizontal(id="main-row"):
            with Container(id="plots"):
                yield SignalsPlot(id="signals")
                yield ResponsePlot(id="response")
                yield TrendPlot("gain_db", id="trend-gain")
                yield TrendPlot("beta", id="trend-beta")
            with Vertical(id="side"):
                yield FiguresPanel(id="figures")
                yield from self.side_panels()
        yield EventsPanel(id="events")
        yield ActionLine(id="action")
        yield Footer()

    def side_panels(self) -> ComposeResult:
        """Panels under the figures (the instruments' health, or the replay controls)."""
        return iter(())

    def on_mount(self) -> None:
        self.setup()
        self._fit_layout()
        self.set_interval(1.0 / self.refresh_hz, self.tick, name="snapshot-timer")
        # The objects of the imports and of the first layout will live as long as the app:
        # out of the collector's reach, a full collection no longer stalls a repaint for
        # 100-200 ms (measured at 160 x 50 cells).
        self.call_after_refresh(gc.freeze)

    def setup(self) -> None:
        """Find the panels and give them what does not change (subclasses extend it).

        (textual calls every class's own ``on_mount``, so subclasses extend this instead.)
        """
        main = self.screen_main
        self.panels = {
            "guard": main.query_one(GuardPanel),
            "pump": main.query_one(PumpPanel),
            "run": main.query_one(RunPanel),
            "figures": main.query_one(FiguresPanel),
            "events": main.query_one(EventsPanel),
            "action": main.query_one(ActionLine),
        }
        self.plots = list(main.query(_SnapshotPlot).results(_SnapshotPlot))
        banner = main.query_one(BenchBanner)
        banner.bench_name = self.bench_name
        banner.simulated = self.simulated
        banner.replay_of = self.replay_of
        self.panels["pump"].limit = self.current_limit

    def on_resize(self) -> None:
        self._fit_layout()

    def _fit_layout(self) -> None:
        w, h = self.size
        self.screen_main.set_class(w < COMPACT_SIZE[0] or h < COMPACT_SIZE[1], "compact")

    @property
    def screen_main(self):
        """The dashboard's own screen (under any modal)."""
        return self.screen_stack[0]

    @property
    def compact(self) -> bool:
        return self.screen_main.has_class("compact")

    def action_swap_plots(self) -> None:
        self.screen_main.toggle_class("second-view")
        snap = self.last_snapshot
        if snap is not None:
            self.call_after_refresh(self._show_plots, snap, True)

    # -- the timer ------------------------------------------------------------------------
    def read_snapshot(self, with_history: bool = True) -> Snapshot | None:  # pragma: no cover - abstract
        raise NotImplementedError

    def tick(self) -> None:
        if not self.is_running or not self.screen_main.is_mounted:
            return
        plot_due = self.ticks % PLOT_EVERY == 0
        snap = self.read_snapshot(with_history=plot_due)  # the history is copied for the plots only
        if snap is None:
            return
        if snap.trace is None and self.last_snapshot is not None:
            snap = replace(
                snap,
                trace=self.last_snapshot.trace,
                pump_trace=self.last_snapshot.pump_trace,
                estimates=self.last_snapshot.estimates,
            )  # for a key that redraws the plots
        self.last_snapshot = snap
        self.ticks += 1
        self.show_snapshot(snap)  # the text first: it is painted without waiting for a plot
        self._since_slow += 1
        if not plot_due and self._since_slow >= SLOW_EVERY:  # never on a plot tick: no long frame
            self._since_slow = 0
            self.show_slow(snap)
        if self.run_clock is not None:
            self.call_after_refresh(self._painted, snap.t)
        if plot_due:  # then the plot, drawn in the refresh after
            self.call_after_refresh(self._show_plots, snap)

    def _painted(self, newest_t: float) -> None:
        self.repaints += 1
        self.latency.add(self.run_clock(), newest_t)

    def show_snapshot(self, snap: Snapshot) -> None:
        """Every snapshot: the guard, the pump, the levels (subclasses add theirs). The plots are
        drawn by `tick` after the refresh that shows these."""
        p = self.panels
        p["guard"].reason = snap.trip_reason or ""
        self.show_guard(snap)
        p["pump"].show(snap.pump)
        lv = snap.levels
        if lv:
            p["run"].levels = (
                lv.get("probe", math.nan),
                lv.get("reference", math.nan),
                lv.get("transmission", math.nan),
            )

    def show_slow(self, snap: Snapshot) -> None:
        """Every `SLOW_EVERY` snapshots: the run, the figures, the events (subclasses add theirs)."""
        p = self.panels
        run = p["run"]
        run.mode = snap.mode
        run.store_bytes = snap.store_bytes
        run.flush_age = snap.last_flush_age
        run.drops = snap.drops
        run.dropped_samples = snap.dropped_samples
        run.faults = snap.faults
        figures = p["figures"]
        figures.estimate = snap.estimate
        figures.has_dark = snap.has_dark
        figures.has_baseline = snap.has_baseline
        p["events"].show(self.events_of(snap))

    def _show_plots(self, snap: Snapshot, force: bool = False) -> None:
        """Redraw at most one plot per tick, taking turns (plotext drawing costs ~10-40 ms);
        none while a modal screen covers them."""
        if self.screen is not self.screen_main:
            return
        plots = self.plots
        if force:
            for plot in plots:
                plot.forget()
        for k in range(len(plots)):
            plot = plots[(self._plot_turn + k) % len(plots)]
            if plot.show(snap):
                self._plot_turn = (self._plot_turn + k + 1) % len(plots)
                return

    def show_guard(self, snap: Snapshot) -> None:
        self.panels["guard"].state = snap.guard_state

    def events_of(self, snap: Snapshot):
        return snap.events

    # -- helpers --------------------------------------------------------------------------
    def say(self, text: str, level: str = "info") -> None:
        """The action line (event loop only)."""
        self.panels["action"].say(text, level)

    def say_from_thread(self, text: str, level: str = "info") -> None:
        """The action line, from a worker thread."""
        try:
            self.call_from_thread(self.say, text, level)
        except RuntimeError:  # the app is closing
            pass
