"""Small modal screens: the key list (help), a note for the run, and the quit confirmation."""

from __future__ import annotations

from collections.abc import Sequence

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Input, Static

from bench.safety.checklist import SECOND_LAYER_NOTICE


class HelpScreen(ModalScreen[None]):
    """Every key of the dashboard with what it does; any of escape, q, ? or h closes it."""

    DEFAULT_CSS = """
    HelpScreen { align: center middle; }
    HelpScreen > VerticalScroll {
        width: 90%; max-width: 100; height: 90%; border: thick $accent; background: $surface; padding: 0 1;
    }
    HelpScreen #notice { margin-top: 1; color: #ffcc40; }
    """

    BINDINGS = [
        Binding("escape", "close", "close"),
        Binding("q", "close", "close", show=False),
        Binding("question_mark", "close", "close", show=False),
        Binding("h", "close", "close", show=False),
    ]

    def __init__(self, title: str, keys: Sequence[tuple[str, str]], extra: str = "") -> None:
        super().__init__()
        self._title = title
        self._keys = list(keys)
        self._extra = extra

    def compose(self) -> ComposeResult:
        table = Table(box=None, show_header=False, padding=(0, 2))
        table.add_column("key", style="bold", no_wrap=True)
        table.add_column("does")
        for key, does in self._keys:
            table.add_row(key, does)
        with VerticalScroll() as box:
            box.border_title = self._title
            yield Static(table, id="keys")
            if self._extra:
                yield Static(Text(self._extra), id="extra")
            yield Static(Text(SECOND_LAYER_NOTICE), id="notice")

    def action_close(self) -> None:
        self.dismiss(None)


class NoteScreen(ModalScreen[str | None]):
    """Type a note for the run; enter stores it, escape drops it."""

    DEFAULT_CSS = """
    NoteScreen { align: center middle; }
    NoteScreen > Vertical { width: 80%; max-width: 90; height: auto; border: thick $accent;
                            background: $surface; padding: 0 1; }
    """

    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def compose(self) -> ComposeResult:
        with Vertical() as box:
            box.border_title = "note for the run (enter: store, escape: drop)"
            yield Input(placeholder="e.g. realigned the probe onto the pumped spot", id="note")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        self.dismiss(text or None)

    def action_cancel(self) -> None:
        self.dismiss(None)


class QuitScreen(ModalScreen[bool]):
    """Asked after the pump was switched off: close the run and quit? (y / n)."""

    DEFAULT_CSS = """
    QuitScreen { align: center middle; }
    QuitScreen > Static { width: 70; max-width: 95%; height: auto; border: thick #f0c020;
                          background: $surface; padding: 1 2; }
    """

    BINDINGS = [
        Binding("y", "answer(True)", "yes, quit"),
        Binding("n", "answer(False)", "no, stay"),
        Binding("escape", "answer(False)", "no, stay", show=False),
    ]

    def __init__(self, situation: str) -> None:
        super().__init__()
        self._situation = situation

    def compose(self) -> ComposeResult:
        text = Text()
        text.append(self._situation + "\n\n")
        text.append("Close the run and quit?  ", style="bold")
        text.append("[y] yes, quit   [n] no, stay")
        yield Static(text)

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)
