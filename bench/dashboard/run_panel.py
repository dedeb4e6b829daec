"""The run panel: which run, how long, how big, how fresh on disk, what was lost, which mode,
and the newest detector levels (updated on every repaint: the reading on screen soonest).

In a replay ``position`` replaces the elapsed time ("12.3 / 40.0 s, x2, paused").
"""

from __future__ import annotations

from rich.text import Text
from textual.reactive import reactive

from bench.dashboard import format as fmt
from bench.dashboard.text_panel import TextPanel


class RunPanel(TextPanel):
    """Run id, elapsed time, file size, age of the last flush, drops and faults, mode, levels."""

    DEFAULT_CSS = """
    RunPanel {
        height: 7;
        min-width: 26;
        padding: 0 1;
        border: round $panel-lighten-2;
    }
    RunPanel.losing { border: heavy #ff9900; }
    """

    run_id: reactive[str | None] = reactive(None)
    elapsed: reactive[float | None] = reactive(None)
    position: reactive[str] = reactive("")
    store_bytes: reactive[int | None] = reactive(None)
    flush_age: reactive[float | None] = reactive(None)
    drops: reactive[int] = reactive(0)
    dropped_samples: reactive[int] = reactive(0)
    faults: reactive[int] = reactive(0)
    mode: reactive[str] = reactive("")
    recording: reactive[bool] = reactive(True)
    #: (probe V, reference V, S) of the newest data, or None
    levels: reactive[tuple[float, float, float] | None] = reactive(None)

    def on_mount(self) -> None:
        self.border_title = "run"
        self._paint()

    def _watch_any(self) -> None:
        self.set_class(self.drops > 0 or self.faults > 0, "losing")
        self._paint()

    watch_run_id = watch_elapsed = watch_position = watch_store_bytes = _watch_any
    watch_flush_age = watch_drops = watch_dropped_samples = watch_faults = _watch_any
    watch_mode = watch_recording = watch_levels = _watch_any

    def _paint(self) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        if self.recording:
            text.append(f"{self.run_id or 'starting…'}")
        else:
            text.append("NOT RECORDED", style="bold reverse")
        when = self.position or f"{fmt.duration(self.elapsed)} elapsed"
        text.append(f"\n{when}  mode ")
        text.append(self.mode or "?", style="bold")
        if self.position:
            text.append(f"\nfile {fmt.size(self.store_bytes)} · stored run")
        elif self.recording:
            text.append(f"\nfile {fmt.size(self.store_bytes)} · flushed {fmt.age(self.flush_age)}")
        else:
            text.append("\nfile —")
        text.append("\ndrops ")
        text.append(str(self.drops), style="bold reverse" if self.drops else "")
        if self.dropped_samples:
            text.append(f" ({self.dropped_samples} samples)")
        text.append("  faults ")
        text.append(str(self.faults), style="bold reverse" if self.faults else "")
        text.append("\nnow ")
        if self.levels is None:
            text.append("—", style="dim")
        else:
            probe, ref, s = self.levels
            text.append(f"probe {fmt.fixed(probe, 3)} V · ref {fmt.fixed(ref, 3)} V · S {fmt.fixed(s, 4)}")
        self.show_text(text)
