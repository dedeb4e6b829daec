"""The events strip: the last few events of the run (guard, trips, faults, notes, settings).

Each line starts with the run-clock time and the kind in words, so nothing depends on colour.
"""

from __future__ import annotations

from collections.abc import Sequence

from rich.text import Text
from textual.reactive import reactive

from bench.dashboard.text_panel import TextPanel
from bench.records import Event

#: Kinds shown, and the style of their tag.
KIND_STYLES = {
    "trip": "bold white on #8000a0",
    "guard": "bold",
    "fault": "bold #ff9900",
    "drop": "bold #ff9900",
    "gap": "bold #ff9900",
    "note": "italic",
    "setting": "",
    "procedure": "",
    "checklist": "dim",
    "run": "dim",
}


def event_line(event: Event) -> Text:
    """``" 12.34 s  guard    safe -> armed: armed by ..."``"""
    line = Text(no_wrap=True, overflow="ellipsis")
    line.append(f"{event.t:8.2f} s ", style="dim")
    line.append(f"{event.kind:<9}", style=KIND_STYLES.get(event.kind, ""))
    line.append(f" {event.text}")
    if event.who and event.kind == "note":
        line.append(f"  ({event.who})", style="dim")
    return line


class EventsPanel(TextPanel):
    """The latest ``lines`` events (checklist answers folded away unless refused)."""

    DEFAULT_CSS = """
    EventsPanel { height: 6; padding: 0 1; border: round $panel-lighten-2; }
    """

    events: reactive[tuple[Event, ...]] = reactive((), always_update=False)

    def on_mount(self) -> None:
        self.border_title = "events"
        self._paint()

    def show(self, events: Sequence[Event]) -> None:
        wanted = tuple(
            e for e in events if e.kind != "checklist" or "REFUSED" in e.text or "arming" in e.text
        )
        if wanted != self.events:
            self.events = wanted

    def watch_events(self) -> None:
        self._paint()

    def _paint(self) -> None:
        rows = max(1, self.size.height - 2) if self.size.height else 4
        shown = self.events[-rows:]
        text = Text(no_wrap=True)
        for i, ev in enumerate(shown):
            if i:
                text.append("\n")
            text.append_text(event_line(ev))
        if not shown:
            text.append("no events yet", style="dim")
        self.show_text(text)

    def on_resize(self) -> None:
        self._paint()
