"""The trip screen: the guard tripped; here is why; acknowledge before arming again.

It opens by itself when the guard trips. The acknowledgement runs in a thread worker (the
guard reads fresh values from the driver); while the condition still holds the guard refuses,
and the refusal is shown here in words. Escape hides the screen: the guard stays tripped, the
guard panel says so, and the acknowledge key brings the screen back.
"""

from __future__ import annotations

from collections.abc import Callable

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

from bench.errors import GainbenchError


class TripScreen(ModalScreen[bool]):
    """Dismissed with True once acknowledged, False when hidden."""

    DEFAULT_CSS = """
    TripScreen { align: center middle; }
    TripScreen > Vertical {
        width: 80%; max-width: 100; height: auto; max-height: 90%;
        border: double #ff60ff; background: #2a0030; padding: 0 1;
    }
    TripScreen #trip-title { text-style: bold; background: #8000a0; color: #ffffff; padding: 0 1; }
    TripScreen #trip-outcome { margin-top: 1; }
    TripScreen #trip-outcome.refused { background: #7a3000; color: #ffffff; text-style: bold; }
    TripScreen #trip-outcome.busy { background: #203060; }
    """

    BINDINGS = [
        Binding("k", "acknowledge", "acknowledge"),
        Binding("enter", "acknowledge", "acknowledge", show=False),
        Binding("escape", "hide", "hide (stays tripped)"),
    ]

    def __init__(self, reason: str, acknowledge: Callable[[], None], who: str) -> None:
        super().__init__()
        self.reason = reason
        self._acknowledge = acknowledge
        self.who = who
        self.busy = False

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(Text("✖ GUARD TRIPPED: the pump output was switched off"), id="trip-title")
            yield Static(self._reason_text(), id="trip-reason")
            yield Static(
                Text(
                    "Find and clear the cause first. Acknowledging returns the guard to SAFE, never to "
                    "emission: arm again through the checklist.\n[k] or [enter] acknowledge    [escape] hide"
                ),
                id="trip-help",
            )
            yield Static("", id="trip-outcome")

    def _reason_text(self) -> Text:
        return Text(f"why: {self.reason}", style="bold")

    def show_reason(self, reason: str) -> None:
        """The guard's trip reason changed (called on the event loop)."""
        if reason and reason != self.reason:
            self.reason = reason
            self.query_one("#trip-reason", Static).update(self._reason_text())

    def action_acknowledge(self) -> None:
        if self.busy:
            return
        self.busy = True
        self._outcome("asking the guard (fresh readings from the driver)…", "busy")
        self._run_acknowledge()

    @work(thread=True, exclusive=True, group="acknowledge")
    def _run_acknowledge(self) -> None:
        try:
            self._acknowledge()
        except GainbenchError as exc:
            self.app.call_from_thread(self._refused, str(exc))
        else:
            self.app.call_from_thread(self._accepted)

    def _refused(self, text: str) -> None:
        self.busy = False
        self._outcome(f"✗ REFUSED: {text}", "refused")

    def _accepted(self) -> None:
        self.busy = False
        self.dismiss(True)

    def _outcome(self, text: str, level: str) -> None:
        out = self.query_one("#trip-outcome", Static)
        out.remove_class("refused", "busy")
        out.add_class(level)
        out.update(Text(text))

    def action_hide(self) -> None:
        self.dismiss(False)
