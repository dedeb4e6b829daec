"""The replay panel: where the replay is, how fast it goes, and the next event to jump to."""

from __future__ import annotations

from rich.text import Text
from textual.reactive import reactive

from bench.dashboard.text_panel import TextPanel
from bench.records import Event


def position_bar(position: float, end: float, width: int) -> str:
    """``"█████░░░░░"``: ``width`` cells, filled in proportion to position / end."""
    if width < 1:
        raise ValueError(f"width: {width} is below 1")
    frac = 0.0 if end <= 0 else min(1.0, max(0.0, position / end))
    full = int(round(frac * width))
    return "█" * full + "░" * (width - full)


def play_state(paused: bool, finished: bool, seeking: bool, speed: float | None) -> str:
    """``"▶ playing ×2"``, ``"❚❚ paused"``, ``"» seeking"``, ``"■ end of run"``."""
    if seeking:
        return "» seeking"
    if finished:
        return "■ end of run"
    if paused:
        return "❚❚ paused"
    return "▶ playing " + ("as fast as possible" if speed is None else f"×{speed:g}")


class ReplayPanel(TextPanel):
    """Position, speed, play state and the next event of a replay."""

    DEFAULT_CSS = """
    ReplayPanel { height: 8; padding: 0 1; border: round #4070d0; }
    """

    position: reactive[float] = reactive(0.0)
    end: reactive[float] = reactive(0.0)
    speed: reactive[float | None] = reactive(1.0)
    paused: reactive[bool] = reactive(False)
    finished: reactive[bool] = reactive(False)
    seeking: reactive[bool] = reactive(False)
    next_event: reactive[Event | None] = reactive(None)
    error: reactive[str] = reactive("")

    def on_mount(self) -> None:
        self.border_title = "replay"
        self._paint()

    def _any(self) -> None:
        self._paint()

    watch_position = watch_end = watch_speed = watch_paused = _any
    watch_finished = watch_seeking = watch_next_event = watch_error = _any

    def _paint(self) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(play_state(self.paused, self.finished, self.seeking, self.speed), style="bold")
        text.append(f"   {self.position:.1f} / {self.end:.1f} s")
        width = max(10, (self.size.width or 40) - 4)
        text.append("\n" + position_bar(self.position, self.end, width))
        ev = self.next_event
        text.append(
            "\nnext: " + (f"{ev.t:.2f} s {ev.kind}: {ev.text}" if ev is not None else "no more events")
        )
        text.append("\nspace pause · , . speed · ← → seek 5 s", style="dim")
        text.append("\nn next event · p previous · home start", style="dim")
        if self.error:
            text.append(f"\n{self.error}", style="bold reverse")
        self.show_text(text)

    def on_resize(self) -> None:
        self._paint()
