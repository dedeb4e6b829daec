"""The mode screen: choose the measurement mode and its timing.

The modes and their words come from the table `bench.estimator.mode.MODES` (watch: steady
pump; chopped: the pump modulated with a chopping period; decay: a period long enough for the
gain to decay; sweep: the pump current in steps, with a dwell time per step, each chopped). A
modulated mode uses the chopping or the decay period (its `Mode.period`).

The choice is a `ModeChoice`; the app applies it in a thread worker.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Label, RadioButton, RadioSet, Static

from bench.config import BenchConfig
from bench.errors import GainbenchError
from bench.estimator.mode import MODES, mode_of
from bench.records import LOCKIN_X
from bench.run.pump_program import chop_frequency


def mode_words(mode: str) -> str:
    """The mode screen's words for ``mode`` (its `Mode.words`)."""
    return mode_of(mode).words


@dataclass(frozen=True)
class ModeChoice:
    """A mode with its timing: periods (s) of the pump modulation, and the sweep's steps."""

    mode: str
    chop_period: float
    decay_period: float
    sweep_steps: int = 6
    sweep_dwell: float = 2.0
    lockin_hz: float = 25.0  # lockin mode's pump modulation, Hz

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise ValueError(f"mode: {self.mode!r} is not one of {', '.join(MODES)}")
        if not (math.isfinite(self.lockin_hz) and self.lockin_hz > 0):
            raise ValueError(f"lockin_hz: {self.lockin_hz!r} is not a positive frequency")
        for name in ("chop_period", "decay_period", "sweep_dwell"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"{name}: {value!r} is not a positive number of seconds")
        if self.sweep_steps < 2:
            raise ValueError(f"sweep_steps: {self.sweep_steps} is below 2")

    @classmethod
    def defaults(cls, cfg: BenchConfig, mode: str = "watch") -> ModeChoice:
        """The bench's defaults: periods from the settle windows at the default current
        (`bench.estimator.timing.default_period`, through `chop_frequency`); the lock-in's
        modulation a tenth of the medium's corner (`bench.run.lockin_setup.default_frequency`)."""
        from bench.estimator.params import EstimatorParams
        from bench.run.lockin_setup import default_frequency

        return cls(
            mode,
            1.0 / chop_frequency(cfg, "chopped"),
            1.0 / chop_frequency(cfg, "decay"),
            lockin_hz=default_frequency(EstimatorParams.from_config(cfg)),
        )

    @property
    def period(self) -> float | None:
        """The pump modulation period this mode uses, s (None: steady)."""
        # a sweep chops every step at the chopping period (drift cancels)
        return {"chop": self.chop_period, "decay": self.decay_period}.get(mode_of(self.mode).period)

    @property
    def modulation_hz(self) -> float | None:
        """The pump modulation this mode needs (None: steady)."""
        if LOCKIN_X in mode_of(self.mode).channels:
            return self.lockin_hz
        period = self.period
        return None if period is None else 1.0 / period

    def describe(self) -> str:
        return mode_of(self.mode).describe_choice(
            self.chop_period, self.decay_period, self.sweep_steps, self.sweep_dwell, self.lockin_hz
        )


class ModeButton(RadioButton):
    """A radio button whose mark is a filled or an empty circle, not only a colour."""

    @property
    def _button(self):
        self.BUTTON_INNER = "●" if self.value else "○"
        return super()._button


class ModeScreen(ModalScreen[ModeChoice | None]):
    """Pick a mode and edit its timing; enter or the apply button applies, escape cancels.

    ``check``, if given, is called with the choice before it is applied; a `ValueError` it
    raises, or a `bench.errors.GainbenchError` (e.g. `bench.estimator.timing.TimingError`: a period that leaves no settled data) is
    shown on the screen and the choice is not applied.
    """

    DEFAULT_CSS = """
    ModeScreen { align: center middle; }
    ModeScreen > Vertical { width: 76; max-width: 98%; height: auto; max-height: 95%;
                            border: thick $accent; background: $surface; padding: 0 1; }
    ModeScreen .row { height: 1; margin-top: 1; }
    ModeScreen .row Label { width: 30; padding: 0 1 0 0; }
    ModeScreen .row Input { width: 16; height: 1; border: none; padding: 0 1; background: $boost; }
    ModeScreen #mode-error { color: #ff8060; text-style: bold; height: auto; }
    ModeScreen #mode-buttons { height: 3; }
    """

    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def __init__(self, current: ModeChoice, check: Callable[[ModeChoice], None] | None = None) -> None:
        super().__init__()
        self.current = current
        self.check = check

    def compose(self) -> ComposeResult:
        c = self.current
        with Vertical() as box:
            box.border_title = "mode and timing"
            with RadioSet(id="mode"):
                for m in MODES:
                    yield ModeButton(mode_words(m), value=(m == c.mode), id=f"mode-{m}")
            for key, label, value in (
                ("chop", "chopping period (ms)", f"{c.chop_period * 1e3:g}"),
                ("decay", "decay: pump period (ms)", f"{c.decay_period * 1e3:g}"),
                ("steps", "sweep: current steps", f"{c.sweep_steps}"),
                ("dwell", "sweep: seconds per step", f"{c.sweep_dwell:g}"),
            ):
                with Horizontal(classes="row"):
                    yield Label(label)
                    yield Input(value, id=f"in-{key}", type="number")
            yield Static("", id="mode-error")
            with Horizontal(id="mode-buttons"):
                yield Button("apply (enter)", id="apply", variant="primary")
                yield Button("cancel (escape)", id="cancel")

    def on_mount(self) -> None:
        self.query_one(RadioSet).focus()

    def chosen_mode(self) -> str:
        pressed = self.query_one(RadioSet).pressed_button
        return pressed.id.removeprefix("mode-") if pressed is not None and pressed.id else self.current.mode

    def read_choice(self) -> ModeChoice:
        """The choice on screen; ValueError naming the field when a value is unusable."""

        def number(key: str, label: str) -> float:
            text = self.query_one(f"#in-{key}", Input).value.strip()
            try:
                return float(text)
            except ValueError:
                raise ValueError(f"{label}: {text!r} is not a number") from None

        chop = number("chop", "chopping period") * 1e-3
        decay = number("decay", "decay pump period") * 1e-3
        steps = number("steps", "sweep steps")
        dwell = number("dwell", "seconds per step")
        if steps != int(steps):
            raise ValueError(f"sweep steps: {steps:g} is not a whole number")
        return replace(
            self.current,
            mode=self.chosen_mode(),
            chop_period=chop,
            decay_period=decay,
            sweep_steps=int(steps),
            sweep_dwell=dwell,
        )

    def _apply(self) -> None:
        try:
            choice = self.read_choice()
            if self.check is not None:
                self.check(choice)
        except (ValueError, GainbenchError) as exc:
            self.query_one("#mode-error", Static).update(Text(f"✗ {exc}"))
            return
        self.dismiss(choice)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self._apply()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        if event.button.id == "apply":
            self._apply()
        else:
            self.dismiss(None)

    def action_cancel(self) -> None:
        self.dismiss(None)
