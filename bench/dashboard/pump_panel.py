"""The pump panel: output on or off, current, optical power, mount temperature, interlock.

The readings are the pump driver's latest polled values (``pump_current``, ``pump_setpoint``,
``pump_on``, ``mount_temp`` in K, ``interlock`` 1 = closed) from the snapshot; the optical
power comes from the bench file's current-to-power calibration.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

from rich.text import Text
from textual.reactive import reactive

from bench.dashboard import format as fmt
from bench.dashboard.text_panel import TextPanel


class PumpPanel(TextPanel):
    """Latest pump readings; ``power_at`` turns a current (A) into optical power (W)."""

    DEFAULT_CSS = """
    PumpPanel {
        height: 7;
        min-width: 26;
        padding: 0 1;
        border: round $panel-lighten-2;
    }
    PumpPanel.pump-on { border: heavy #ff4040; }
    """

    output_on: reactive[bool | None] = reactive(None)
    current: reactive[float | None] = reactive(None)
    setpoint: reactive[float | None] = reactive(None)
    mount_temp: reactive[float | None] = reactive(None)
    interlock_closed: reactive[bool | None] = reactive(None)
    limit: reactive[float | None] = reactive(None)

    def __init__(self, power_at: Callable[[float], float] | None = None, **kwargs) -> None:
        super().__init__(**kwargs)
        self.power_at = power_at

    def on_mount(self) -> None:
        self.watch_limit()

    def show(self, pump: Mapping[str, float]) -> None:
        """Take the readings of one snapshot; a channel it lacks shows as not read (?)."""
        on, closed = pump.get("pump_on"), pump.get("interlock")
        self.output_on = None if on is None else on > 0.5
        self.current = pump.get("pump_current")
        self.setpoint = pump.get("pump_setpoint")
        self.mount_temp = pump.get("mount_temp")
        self.interlock_closed = None if closed is None else closed > 0.5

    def watch_output_on(self, on: bool | None) -> None:
        self.set_class(bool(on), "pump-on")
        self._paint()

    def watch_current(self) -> None:
        self._paint()

    def watch_setpoint(self) -> None:
        self._paint()

    def watch_mount_temp(self) -> None:
        self._paint()

    def watch_interlock_closed(self) -> None:
        self._paint()

    def watch_limit(self) -> None:
        self.border_title = "pump" if self.limit is None else f"pump (limit {self.limit:g} A)"
        self._paint()

    def _paint(self) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        power = None
        if self.power_at is not None and self.setpoint is not None:
            power = self.power_at(self.setpoint)
        if self.output_on is None:
            text.append("output ?", style="bold")
        elif self.output_on:
            text.append(" OUTPUT ON ", style="bold white on #b00000")
        else:
            text.append("output off", style="bold")
        text.append(f"  {fmt.watts(power)}")
        text.append(f"\nset {fmt.amps(self.setpoint)}  read {fmt.amps(self.current)}")
        text.append(f"\nmount {fmt.celsius(self.mount_temp)}")
        text.append("\ninterlock ")
        if self.interlock_closed is None:
            text.append("?")
        elif self.interlock_closed:
            text.append("closed")
        else:
            text.append(" OPEN ", style="bold white on #8000a0")
        self.show_text(text)
