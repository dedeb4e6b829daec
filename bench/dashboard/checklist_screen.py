"""The arming checklist as a modal screen: the same items as the terminal, one at a time.

First the operator's name, with the notice that this software is a second layer only and
the caution of the eyewear figures. Then each `bench.safety.checklist.Item` in order: checks read
from the pump driver are shown with their verdict; yes/no confirmations take ``y`` or ``n``;
eyewear items take the OD printed on the operator's eyewear. Asking stops at the first item
that refuses arming. The answers then go to ``arm`` (`bench.run.measurement.Measurement.arm`),
which records every answer in the run and arms the guard only if all passed; the verdict is
shown, refusals in words.

Reading the pump driver and arming run in thread workers; the screen is updated through
``call_from_thread`` only.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Static

from bench.errors import GainbenchError
from bench.safety import exposure_limits as laser_safety
from bench.safety.checklist import (
    CHECK,
    CONFIRM,
    EYEWEAR,
    SECOND_LAYER_NOTICE,
    Answer,
    ChecklistResult,
    Item,
    evaluate,
)
from bench.safety.checklist_answers import parse_od

REMINDER = (
    "Software layer only: the hardware interlock, your laser safety officer (LSO), "
    "ANSI Z136.1 / IEC 60825-1 and local rules come first."
)


def verdict_of(
    items: Sequence[Item],
    index: int,
    answers: Mapping[str, Answer],
    readings: Mapping[str, object],
    operator: str,
    clock: Callable[[], float],
) -> tuple[bool, str]:
    """(ok, why) of item ``index`` given the answers so far (`bench.safety.checklist.evaluate`'s wording)."""
    result = evaluate(items, answers, readings, operator or "unnamed", clock=clock)
    record = result.records[index]
    parts = record.text.split(": ", 2)
    return bool(record.data.get("ok")), parts[2] if len(parts) == 3 else record.text


class ChecklistScreen(ModalScreen[ChecklistResult | None]):
    """Dismissed with the `ChecklistResult` of ``arm``, or None when cancelled before the end."""

    DEFAULT_CSS = """
    ChecklistScreen { align: center middle; }
    ChecklistScreen > Vertical {
        width: 92%; max-width: 110; height: 95%; max-height: 40;
        border: thick #f0c020; background: $surface; padding: 0 1;
    }
    ChecklistScreen #cl-reminder { color: #ffcc40; height: auto; }
    ChecklistScreen #cl-step { text-style: bold; height: auto; margin-top: 1; }
    ChecklistScreen #cl-body { height: 1fr; }
    ChecklistScreen #cl-answer { height: 3; }
    ChecklistScreen #cl-answer.hidden { display: none; }
    ChecklistScreen #cl-buttons { height: 3; }
    ChecklistScreen #cl-buttons.hidden { display: none; }
    ChecklistScreen #cl-feedback { height: auto; }
    ChecklistScreen #cl-feedback.refused { background: #7a3000; color: #ffffff; text-style: bold; }
    ChecklistScreen #cl-feedback.passed { background: #123d24; color: #ffffff; text-style: bold; }
    ChecklistScreen #cl-keys { height: 1; color: $text-muted; }
    """

    BINDINGS = [
        Binding("escape", "cancel", "cancel"),
        Binding("pagedown", "scroll_text(1)", "more text", show=False),
        Binding("pageup", "scroll_text(-1)", "back", show=False),
        Binding("y", "confirm(True)", "yes", show=False),
        Binding("n", "confirm(False)", "no", show=False),
        Binding("enter", "next", "continue", show=False),
    ]

    def __init__(
        self,
        items: Sequence[Item],
        read_pump: Callable[[], Mapping[str, object]],
        arm: Callable[[Mapping[str, Answer], str], ChecklistResult],
        clock: Callable[[], float],
        operator: str = "",
    ) -> None:
        super().__init__()
        if not items:
            raise ValueError("items: the checklist is empty")
        self.items = list(items)
        self._read_pump = read_pump
        self._arm = arm
        self._clock = clock
        self.operator = operator.strip()
        self.answers: dict[str, Answer] = {}
        self.readings: Mapping[str, object] | None = None
        self.step = -1  # -1: the operator's name; len(items): the verdict
        self.stage = "asking"  # asking, arming, done
        self.result: ChecklistResult | None = None

    # -- layout ---------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        with Vertical() as box:
            box.border_title = "arming checklist"
            yield Static(Text(REMINDER), id="cl-reminder")
            yield Static("", id="cl-step")
            with VerticalScroll(id="cl-body"):
                yield Static("", id="cl-text")
            yield Input(id="cl-answer")
            with Horizontal(id="cl-buttons"):
                yield Button("yes (y)", id="cl-yes", variant="success")
                yield Button("no (n)", id="cl-no", variant="error")
                yield Button("continue (enter)", id="cl-continue", variant="primary")
            yield Static("", id="cl-feedback")
            yield Static("", id="cl-keys")

    def on_mount(self) -> None:
        # The buttons are for the mouse; keys go to the screen's bindings (y, n, enter). A
        # focused button would ignore a second enter within its 0.2 s press effect.
        for button in self.query(Button):
            button.can_focus = False
        self._read_readings()
        self._show_step()

    # -- workers --------------------------------------------------------------------------
    @work(thread=True, exclusive=True, group="checklist-read")
    def _read_readings(self) -> None:
        readings = self._read_pump()
        self.app.call_from_thread(self._got_readings, readings)

    def _got_readings(self, readings: Mapping[str, object]) -> None:
        self.readings = readings
        if 0 <= self.step < len(self.items) and self.items[self.step].kind == CHECK:
            self._show_step()

    @work(thread=True, exclusive=True, group="checklist-arm")
    def _submit(self, answers: dict[str, Answer], operator: str) -> None:
        try:
            result = self._arm(answers, operator)
        except GainbenchError as exc:
            self.app.call_from_thread(self._armed, None, str(exc))
        else:
            self.app.call_from_thread(self._armed, result, "")

    def _armed(self, result: ChecklistResult | None, error: str) -> None:
        self.stage = "done"
        self.result = result
        self.query_one("#cl-step", Static).update(Text("Verdict of the arming checklist"))
        summary = Text()
        for record in result.records[:-1] if result is not None else ():  # the last is the verdict
            summary.append(record.text + "\n", style="" if record.data.get("ok", True) else "bold reverse")
        self._set_text(summary)
        feedback = self.query_one("#cl-feedback", Static)
        if result is not None and result.passed:
            self._feedback(
                "✓ Arming checklist passed: the guard is ARMED (pump output still off). "
                "Emission needs its own key.",
                "passed",
            )
        else:
            refusals = result.refusals if result is not None else []
            why = error or (refusals[0] if refusals else "no verdict")
            more = f" ({len(refusals) - 1} more reasons above)" if len(refusals) > 1 and not error else ""
            self._feedback(f"✗ ARMING REFUSED: {why}{more}", "refused")
        feedback.scroll_visible()
        self._layout_for("done")

    # -- steps ----------------------------------------------------------------------------
    def _show_step(self) -> None:
        total = len(self.items)
        text = Text()
        if self.step < 0:
            self.query_one("#cl-step", Static).update(Text("Who is running the checklist?"))
            text.append(SECOND_LAYER_NOTICE + "\n\n", style="bold")
            text.append(laser_safety.caution_text())
            self._set_text(text)
            answer = self.query_one("#cl-answer", Input)
            answer.placeholder = "operator name"
            answer.type = "text"
            answer.value = self.operator
            self._layout_for("input")
            return
        item = self.items[self.step]
        self.query_one("#cl-step", Static).update(Text(f"[{self.step + 1}/{total}] {item.prompt}"))
        if item.kind == CHECK:
            if self.readings is None:
                text.append("reading the pump driver…")
            else:
                ok, why = verdict_of(
                    self.items, self.step, self.answers, self.readings, self.operator, self._clock
                )
                text.append("ok: " if ok else "REFUSED: ", style="bold" if ok else "bold reverse")
                text.append(why)
            self._set_text(text)
            self._layout_for("check")
        elif item.kind == CONFIRM:
            text.append("Answer only for what you have checked yourself at the bench.")
            self._set_text(text)
            self._layout_for("confirm")
        else:
            text.append(item.note)
            self._set_text(text)
            answer = self.query_one("#cl-answer", Input)
            answer.value = ""
            answer.type = "number"
            answer.placeholder = "OD printed on your eyewear for this wavelength, e.g. 5"
            self._layout_for("input")

    def _set_text(self, text: Text) -> None:
        self.query_one("#cl-text", Static).update(text)
        self.query_one("#cl-body", VerticalScroll).scroll_home(animate=False)

    def _layout_for(self, kind: str) -> None:
        answer = self.query_one("#cl-answer", Input)
        buttons = self.query_one("#cl-buttons", Horizontal)
        # a hidden widget is also disabled, so it can never keep the focus and swallow a key
        answer.set_class(kind != "input", "hidden")
        answer.disabled = kind != "input"
        buttons.set_class(kind == "input", "hidden")
        for button_id, shown in (
            ("#cl-yes", kind == "confirm"),
            ("#cl-no", kind == "confirm"),
            ("#cl-continue", kind in ("check", "done")),
        ):
            button = self.query_one(button_id, Button)
            button.display = shown
            button.disabled = not shown
        keys = {
            "input": "[enter] next   [pgdn/pgup] scroll the text   [escape] cancel (nothing is armed)",
            "confirm": "[y] yes   [n] no   [escape] cancel (nothing is armed)",
            "check": "[enter] continue   [escape] cancel (nothing is armed)",
            "done": "[enter] or [escape] close   [pgdn/pgup] scroll",
            "arming": "judging the answers…",
        }[kind]
        self.query_one("#cl-keys", Static).update(Text(keys))
        if kind == "input":
            answer.focus()
        else:
            self.set_focus(None)

    def _feedback(self, text: str, level: str = "") -> None:
        fb = self.query_one("#cl-feedback", Static)
        fb.remove_class("refused", "passed")
        if level:
            fb.add_class(level)
        fb.update(Text(text))

    def _advance(self) -> None:
        self._feedback("")
        self.step += 1
        if self.step >= len(self.items):
            self._finish()
        else:
            self._show_step()

    def _judge_current(self) -> bool:
        """True when the current item passes; otherwise says why and finishes (refused)."""
        ok, why = verdict_of(
            self.items, self.step, self.answers, self.readings or {}, self.operator, self._clock
        )
        if not ok:
            self._feedback(f"Arming will be refused: {why}", "refused")
            self._finish()
        return ok

    def _finish(self) -> None:
        self.stage = "arming"
        self.query_one("#cl-step", Static).update(Text("Recording the answers and judging them…"))
        self._layout_for("arming")
        self.query_one("#cl-buttons", Horizontal).set_class(True, "hidden")
        self._submit(dict(self.answers), self.operator)

    # -- input ----------------------------------------------------------------------------
    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        if self.stage != "asking":
            return
        value = event.value.strip()
        if self.step < 0:
            if not value:
                self._feedback("Name the person answering the checklist (it is recorded with every answer).")
                return
            self.operator = value
            self._advance()
            return
        item = self.items[self.step]
        if item.kind == CHECK:
            self.action_next()
            return
        if item.kind != EYEWEAR:
            return
        try:
            od = parse_od(value)
        except ValueError as exc:
            self._feedback(
                f"Not accepted: {exc}. Enter the OD printed on your eyewear for this wavelength, "
                "a number such as 5."
            )
            return
        self.answers[item.id] = Answer(od, t=float(self._clock()), who=self.operator, via="dashboard")
        if self._judge_current():
            self._advance()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        event.stop()
        if event.button.id == "cl-yes":
            self.action_confirm(True)
        elif event.button.id == "cl-no":
            self.action_confirm(False)
        else:
            self.action_next()

    def action_confirm(self, yes: bool) -> None:
        if self.stage != "asking" or not (0 <= self.step < len(self.items)):
            return
        item = self.items[self.step]
        if item.kind != CONFIRM:
            return
        self.answers[item.id] = Answer(bool(yes), t=float(self._clock()), who=self.operator, via="dashboard")
        if self._judge_current():
            self._advance()

    def action_next(self) -> None:
        if self.stage == "done":
            self.dismiss(self.result)
            return
        if self.stage != "asking" or not (0 <= self.step < len(self.items)):
            return
        if self.items[self.step].kind != CHECK or self.readings is None:
            return
        if self._judge_current():
            self._advance()

    def action_scroll_text(self, direction: int) -> None:
        body = self.query_one("#cl-body", VerticalScroll)
        if direction > 0:
            body.scroll_page_down(animate=False)
        else:
            body.scroll_page_up(animate=False)

    def action_cancel(self) -> None:
        if self.stage == "arming":
            return  # the verdict is on its way; it closes with enter once shown
        self.dismiss(self.result if self.stage == "done" else None)
