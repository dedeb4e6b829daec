"""The guard panel: the guard's state as a big word, a symbol, a sentence and a colour.

Colour is never the only carrier of meaning: the word (``SAFE``, ``ARMED``, ``EMITTING``,
``TRIPPED``), its symbol and the sentence under it say the same thing on a monochrome
terminal or to a colour-blind reader.
"""

from __future__ import annotations

from rich.text import Text
from textual.message import Message
from textual.reactive import reactive

from bench.dashboard.format import GUARD_LOOKS, guard_look
from bench.dashboard.text_panel import TextPanel


class GuardPanel(TextPanel):
    """Shows ``state`` and, when tripped, the trip ``reason``; ``source`` says where it comes from."""

    DEFAULT_CSS = """
    GuardPanel {
        text-wrap: wrap;
        height: 7;
        min-width: 22;
        padding: 0 1;
        border: heavy $panel-lighten-2;
        border-title-align: left;
        content-align: left top;
    }
    GuardPanel.guard-safe { background: #123d24; color: #e8fff0; border: heavy #3fbf6f; }
    GuardPanel.guard-armed { background: #4a3a00; color: #fff6d8; border: heavy #f0c020; }
    GuardPanel.guard-emitting { background: #7a0a0a; color: #ffffff; border: heavy #ff4040; text-style: bold; }
    GuardPanel.guard-tripped { background: #5a0060; color: #ffffff; border: double #ff60ff; text-style: bold; }
    GuardPanel.guard-unknown { background: $panel; }
    """

    state: reactive[str | None] = reactive(None)
    reason: reactive[str] = reactive("")
    source: reactive[str] = reactive("live")

    class StateChanged(Message):
        """The guard's state changed (``old`` is None at the first reading)."""

        def __init__(self, old: str | None, new: str | None, reason: str) -> None:
            super().__init__()
            self.old = old
            self.new = new
            self.reason = reason

    def on_mount(self) -> None:
        self.border_title = "guard"
        self._paint()

    def watch_state(self, old: str | None, new: str | None) -> None:
        for look in GUARD_LOOKS.values():
            self.remove_class(look.css_class)
        self.remove_class("guard-unknown")
        self.add_class(guard_look(new).css_class)
        self._paint()
        if old != new:
            self.post_message(self.StateChanged(old, new, self.reason))

    def watch_reason(self) -> None:
        self._paint()

    def watch_source(self) -> None:
        self.border_title = "guard" if self.source == "live" else f"guard ({self.source})"
        self._paint()

    def _paint(self) -> None:
        look = guard_look(self.state)
        text = Text()
        text.append(f"{look.symbol} {look.word}", style="bold")
        text.append(f"\n{look.meaning}")
        if self.state == "tripped" and self.reason:
            text.append(f"\nwhy: {self.reason}")
        self.show_text(text)
