"""The figures panel: the latest cumulative estimate in large type, with its uncertainties and flags.

The excited fraction β and the single-pass gain (dB) are drawn with textual's `Digits`; the
other figures (ln R, gain coefficient, excited density, lifetime) are one line each. Every
figure shows its standard uncertainty σ; the flags are spelled out. Whether a dark and a
baseline are in use is shown here too, since the estimates depend on them.
"""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.reactive import reactive
from textual.widgets import Digits, Static

from bench.dashboard import format as fmt
from bench.records import Estimate

#: The one-line figures: key, label, scale from SI, unit.
SMALL_FIGURES = (
    ("ln_ratio", "ln R", 1.0, ""),
    ("gain_coefficient_per_cm", "g", 1.0, "cm⁻¹"),
    ("n2_per_m3", "N₂", 1e-6, "cm⁻³"),
    ("tau_s", "τ", 1e3, "ms"),
    ("beta_max", "β max", 1.0, ""),
    ("p_sat_w", "P sat", 1.0, "W"),
)


#: Figures shown first in a mode (the panel may be too short for all of them).
MODE_FIRST = {"decay": ("tau_s",), "sweep": ("beta_max", "p_sat_w")}


class FiguresPanel(Vertical):
    """The latest estimate (``estimate``) and whether dark and baseline are captured."""

    DEFAULT_CSS = """
    FiguresPanel {
        width: 30;
        height: 1fr;
        padding: 0 1;
        border: round $panel-lighten-2;
    }
    FiguresPanel .figure-label { height: 1; color: $text-muted; text-wrap: nowrap; text-overflow: ellipsis; }
    FiguresPanel #small-figures, FiguresPanel #prerequisites { text-wrap: nowrap; text-overflow: ellipsis; }
    FiguresPanel Digits { width: auto; height: 3; }
    FiguresPanel #small-figures { height: 6; }
    FiguresPanel #flags { height: 2; }
    FiguresPanel #prerequisites { height: 1; }
    FiguresPanel.flagged #flags { color: #ffb030; text-style: bold; }
    """

    estimate: reactive[Estimate | None] = reactive(None, always_update=False)
    has_dark: reactive[bool] = reactive(False)
    has_baseline: reactive[bool] = reactive(False)

    def compose(self) -> ComposeResult:
        yield Static("β excited fraction", id="beta-label", classes="figure-label")
        yield Digits("", id="beta")
        yield Static("gain, dB", id="gain-label", classes="figure-label")
        yield Digits("", id="gain")
        yield Static("flags: none", id="flags")
        yield Static("", id="prerequisites")
        yield Static("", id="small-figures")

    def on_mount(self) -> None:
        self.border_title = "estimate"
        self._paint()

    def watch_estimate(self) -> None:
        self._paint()

    def watch_has_dark(self) -> None:
        self._paint_prerequisites()

    def watch_has_baseline(self) -> None:
        self._paint_prerequisites()

    def _static(self, selector: str, content) -> None:
        """Fixed-height lines: no layout pass needed (see the CSS above)."""
        self.query_one(selector, Static).update(content, layout=False)

    def _paint(self) -> None:
        if not self.is_mounted:
            return
        e = self.estimate
        values = e.values if e is not None else {}
        beta, gain = values.get("beta"), values.get("gain_db")
        self.query_one("#beta", Digits).update(fmt.fixed(beta.value, 4) if beta else "")
        self.query_one("#gain", Digits).update(fmt.fixed(gain.value, 3, sign=True) if gain else "")
        self._static(
            "#beta-label",
            Text(f"β  σ {fmt.sigma(beta)}  (excited fraction)" if beta else "β: no estimate yet"),
        )
        self._static(
            "#gain-label",
            Text(
                f"gain dB  σ {fmt.sigma(gain, unit='dB')}  (single pass)"
                if gain
                else "gain dB: no estimate yet"
            ),
        )
        lines = Text(no_wrap=True, overflow="ellipsis")
        first = MODE_FIRST.get(e.mode if e is not None else "", ())
        ordered = [row for key in first for row in SMALL_FIGURES if row[0] == key]
        ordered += [row for row in SMALL_FIGURES if row[0] not in first]
        for key, label, scale, unit in ordered:
            q = values.get(key)
            if q is None and key in ("beta_max", "p_sat_w"):
                continue
            if lines:
                lines.append("\n")
            lines.append(f"{label:<5} ", style="dim")
            lines.append(fmt.quantity(q, 4, scale, unit))
        self._static("#small-figures", lines)
        flags = e.flags if e is not None else frozenset()
        self.set_class(bool(flags), "flagged")
        self.border_title = "estimate" if e is None else f"estimate ({e.mode}, {e.scope})"
        self._static(
            "#flags", Text("flags: " + (fmt.flag_words(flags) if e is not None else "no estimate yet"))
        )
        self._paint_prerequisites()

    def _paint_prerequisites(self) -> None:
        if not self.is_mounted:
            return
        text = Text(no_wrap=True)
        text.append("dark ")
        text.append("✓ yes" if self.has_dark else "✗ no", style="" if self.has_dark else "bold reverse")
        text.append("  baseline ")
        text.append(
            "✓ yes" if self.has_baseline else "✗ no", style="" if self.has_baseline else "bold reverse"
        )
        self._static("#prerequisites", text)
