"""`TextPanel`: a fixed-size panel of text that repaints only when what it shows changes.

The panels are handed every snapshot (30 a second) but most of what they show changes far
less often; comparing the text before updating keeps the terminal's work, and the
interpreter time taken from the acquisition threads, small. Their heights are fixed in CSS,
so an update never needs a layout pass.
"""

from __future__ import annotations

from rich.text import Text
from textual.widgets import Static


class TextPanel(Static):
    """A `Static` whose ``show_text`` skips updates that would not change the screen."""

    DEFAULT_CSS = """
    TextPanel { text-wrap: nowrap; text-overflow: ellipsis; }
    """

    def __init__(self, **kwargs) -> None:
        super().__init__("", **kwargs)
        self._shown: tuple | None = None

    def show_text(self, text: Text) -> bool:
        """Show ``text``; returns whether anything changed."""
        key = (text.plain, tuple(text.spans), text.style)
        if key == self._shown:
            return False
        self._shown = key
        self.update(text, layout=False)
        return True
