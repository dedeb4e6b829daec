"""The top line: which bench this is, and an unmistakable warning when it is simulated.

And `ActionLine`, the one line under the panels that says what the last action did (a
procedure running, done, or refused with the reason), so a refusal is never only a toast.
"""

from __future__ import annotations

from rich.text import Text
from textual.reactive import reactive

from bench.dashboard.text_panel import TextPanel


class BenchBanner(TextPanel):
    """``SIMULATED BENCH`` in reverse video, or the bench's name; ``replay`` says it is a replay."""

    DEFAULT_CSS = """
    BenchBanner { height: 1; width: 1fr; padding: 0 1; background: $panel; text-style: bold; }
    BenchBanner.simulated { background: #f0c020; color: #000000; }
    BenchBanner.replay { background: #2050a0; color: #ffffff; }
    """

    bench_name: reactive[str] = reactive("")
    simulated: reactive[bool] = reactive(False)
    replay_of: reactive[str] = reactive("")

    def on_mount(self) -> None:
        self._paint()

    def watch_bench_name(self) -> None:
        self._paint()

    def watch_simulated(self) -> None:
        self._paint()

    def watch_replay_of(self) -> None:
        self._paint()

    def _paint(self) -> None:
        self.set_class(self.simulated and not self.replay_of, "simulated")
        self.set_class(bool(self.replay_of), "replay")
        if self.replay_of:
            sim = " of a SIMULATED bench" if self.simulated else ""
            text = f"▶ REPLAY{sim}: run {self.replay_of}; read-only, no instrument is driven"
        elif self.simulated:
            text = "▲ SIMULATED BENCH: no real laser or instrument is connected ▲  " + self.bench_name
        else:
            text = f"LIVE BENCH: {self.bench_name}  (software guard is a second layer only)"
        self.show_text(Text(text, no_wrap=True, overflow="ellipsis"))


class ActionLine(TextPanel):
    """The last action's outcome: ``text`` with a ``level`` of info, busy, done or refused."""

    DEFAULT_CSS = """
    ActionLine { height: 1; width: 1fr; padding: 0 1; }
    ActionLine.busy { background: #203060; }
    ActionLine.done { background: #123d24; }
    ActionLine.refused { background: #7a3000; color: #ffffff; text-style: bold; }
    """

    text: reactive[str] = reactive("")
    level: reactive[str] = reactive("info")

    LEVELS = ("info", "busy", "done", "refused")
    PREFIX = {"info": "", "busy": "… ", "done": "✓ ", "refused": "✗ REFUSED: "}

    def say(self, text: str, level: str = "info") -> None:
        if level not in self.LEVELS:
            raise ValueError(f"level: {level!r} is not one of {', '.join(self.LEVELS)}")
        self.level = level
        self.text = text

    def watch_level(self, old: str, new: str) -> None:
        self.remove_class(*self.LEVELS)
        self.add_class(new)
        self._paint()

    def watch_text(self) -> None:
        self._paint()

    def _paint(self) -> None:
        self.show_text(Text(self.PREFIX.get(self.level, "") + self.text, no_wrap=True, overflow="ellipsis"))
