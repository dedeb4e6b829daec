"""The health panel: each instrument's read rate, latency, errors, reconnects and retries.

Fed with the drivers' `drivers.session.InstrumentStats` (read by the app's timer: they are
counters copied under the session's own short lock) and the dashboard's own figures: the
sample rate, the repaint rate and the time a reading takes to reach the screen.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from rich.text import Text
from textual.reactive import reactive

from bench.dashboard.meters import LatencyFigures
from bench.dashboard.text_panel import TextPanel


@dataclass(frozen=True)
class InstrumentHealth:
    """One row: an instrument's counters and its read rate (reads per real second)."""

    role: str
    reads: int
    read_rate: float | None
    last_latency_s: float
    mean_latency_s: float
    errors: int
    reconnects: int
    retries: int
    last_error: str = ""


class HealthPanel(TextPanel):
    """Instrument rows, then the sample rate and the dashboard's own latency."""

    DEFAULT_CSS = """
    HealthPanel {
        height: 9;
        padding: 0 1;
        border: round $panel-lighten-2;
    }
    HealthPanel.troubled { border: heavy #ff9900; }
    """

    rows: reactive[tuple[InstrumentHealth, ...]] = reactive(())
    sample_rate: reactive[float | None] = reactive(None)
    latency: reactive[LatencyFigures | None] = reactive(None)

    def on_mount(self) -> None:
        self.border_title = "instruments"
        self._paint()

    def show(self, stats: Mapping[str, object], rates: Mapping[str, float | None]) -> None:
        """Take driver stats (role -> InstrumentStats) and read rates (role -> reads/s)."""
        self.rows = tuple(
            InstrumentHealth(
                role,
                s.reads,
                rates.get(role),
                s.last_latency_s,
                s.mean_latency_s,
                s.errors,
                s.reconnects,
                s.retries,
                s.last_error,
            )
            for role, s in stats.items()
        )

    def watch_rows(self) -> None:
        self.set_class(any(r.errors or r.reconnects for r in self.rows), "troubled")
        self._paint()

    def watch_sample_rate(self) -> None:
        self._paint()

    def watch_latency(self) -> None:
        self._paint()

    def _paint(self) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(f"{'':<9}{'read/s':>6} {'ms now/mean':>11} {'err':>4} {'recon':>6}", style="dim")
        bad = "bold reverse"
        for r in self.rows:
            rate = "—" if r.read_rate is None else f"{r.read_rate:.0f}"
            lat = f"{r.last_latency_s * 1e3:.1f}/{r.mean_latency_s * 1e3:.1f}"
            text.append(f"\n{r.role[:9]:<9}{rate:>6} {lat:>11} ")
            text.append(f"{r.errors:>4}", style=bad if r.errors else "")
            text.append(" ")
            text.append(f"{r.reconnects:>6}", style=bad if r.reconnects else "")
        if not self.rows:
            text.append("\n(no readings yet)")
        retries = sum(r.retries for r in self.rows)
        rate = "—" if self.sample_rate is None else f"{self.sample_rate / 1e3:.0f} kS/s"
        text.append(f"\nsamples {rate} · retries {retries}")
        if self.latency is not None:
            s = self.latency
            text.append(
                f"\nscreen {s.repaint_hz:.0f}/s, reading→screen {s.median * 1e3:.0f} ms "
                f"(p95 {s.p95 * 1e3:.0f})"
            )
        last = next((r for r in self.rows if r.last_error), None)
        if last is not None:
            text.append(f"\nlast error, {last.role}: {last.last_error}", style="dim")
        self.show_text(text)
