"""Pump role: a laser-diode current driver with output switch, interlock and mount temperature.

The driver only carries out what it is asked; deciding when the pump may emit is the guard's
job, and neither replaces the hardware interlock. Laser safety rests with the laser safety
officer, ANSI Z136.1 / IEC 60825-1 and local rules.
"""

from __future__ import annotations

from typing import Any

from drivers.base import Driver, check_finite
from drivers.errors import ProfileError


class PumpDriver(Driver):
    """Laser-diode current driver with output switch, hardware interlock and mount temperature."""

    DRIVER_NAME = "pump-driver"
    ROLE = "pump"
    OPTIONS = frozenset({"compound_queries"})

    #: What `read_status` reads, in this order (safety-critical first).
    STATUS_OPS = ("interlock", "output_state", "measured_current", "current_setpoint", "mount_temperature")

    def read_status(self) -> dict[str, Any]:
        """Interlock, output, current, setpoint and mount temperature (SI), in one exchange
        when the profile's option ``compound_queries`` is true, else one query each."""
        if self.options.get("compound_queries"):
            values = self.session.query_many(self.STATUS_OPS)
        else:
            values = [self.session.query(op) for op in self.STATUS_OPS]
        return dict(zip(self.STATUS_OPS, values))

    @property
    def reads_sample_temperature(self) -> bool:
        """Whether the profile has the optional ``sample_temperature`` (a second temperature input)."""
        return self.session.has("sample_temperature")

    def sample_temperature(self) -> float:
        """The sample's (or its mount's) temperature on the second input, K."""
        return float(self.session.query("sample_temperature"))

    def set_current(self, current_a: float) -> None:
        """Set the current setpoint (A)."""
        self.session.write("set_current", value=check_finite("current_a", current_a, minimum=0.0))

    def current_setpoint(self) -> float:
        """The current setpoint (A)."""
        return float(self.session.query("current_setpoint"))

    def measured_current(self) -> float:
        """The diode current the driver measures (A)."""
        return float(self.session.query("measured_current"))

    def current_limit(self) -> float:
        """The driver's current limit (A)."""
        return float(self.session.query("current_limit"))

    def set_current_limit(self, current_a: float) -> None:
        """Set the driver's current limit (A)."""
        self.session.write("set_current_limit", value=check_finite("current_a", current_a, minimum=0.0))

    def output(self, on: bool) -> None:
        """Switch the output on or off."""
        if not isinstance(on, bool):
            raise ValueError(f"on: expected True or False, got {on!r}")
        self.session.write("output_on" if on else "output_off")

    def output_is_on(self) -> bool:
        """Whether the output is on."""
        return bool(self.session.query("output_state"))

    def interlock_closed(self) -> bool:
        """Whether the hardware interlock is closed (the driver may emit)."""
        return bool(self.session.query("interlock"))

    def mount_temperature(self) -> float:
        """Mount temperature (K)."""
        return float(self.session.query("mount_temperature"))

    def mount_temperature_setpoint(self) -> float:
        """Mount temperature setpoint (K)."""
        return float(self.session.query("mount_temperature_setpoint"))

    def set_mount_temperature(self, temperature_k: float) -> None:
        """Set the mount temperature setpoint (K)."""
        self.session.write(
            "set_mount_temperature", value=check_finite("temperature_k", temperature_k, positive=True)
        )

    def set_modulation(self, freq_hz: float | None) -> None:
        """Square-wave modulate the output at ``freq_hz``, or stop modulating (None)."""
        if freq_hz is None:
            self.session.write("modulation_off")
            return
        hz = check_finite("freq_hz", freq_hz, positive=True)
        self.session.write("set_modulation_frequency", value=hz)
        self.session.write("modulation_on")

    def modulation_frequency(self) -> float:
        """Modulation frequency (Hz)."""
        return float(self.session.query("modulation_frequency"))

    # -- pulsed output (optional operations: refused, before anything is sent, when the
    # -- profile lacks them)

    def set_pulse_width(self, width_s: float) -> None:
        """Set the width of the output's pulses (s)."""
        width = check_finite("width_s", width_s, positive=True)
        self._need_pulse_ops("set_pulse_width")
        self.session.write("set_pulse_width", value=width)

    def set_pulse_period(self, period_s: float) -> None:
        """Set the period of the output's pulses (s)."""
        period = check_finite("period_s", period_s, positive=True)
        self._need_pulse_ops("set_pulse_period")
        self.session.write("set_pulse_period", value=period)

    def pulse(self, on: bool) -> None:
        """Switch pulsing on or off. With the output on, pulsing off leaves it emitting
        continuously: switch the output off first when that is not wanted."""
        if not isinstance(on, bool):
            raise ValueError(f"on: expected True or False, got {on!r}")
        op = "pulse_on" if on else "pulse_off"
        self._need_pulse_ops(op)
        self.session.write(op)

    def set_pulsing(self, width_s: float, period_s: float) -> None:
        """Pulse the output with pulses ``width_s`` long every ``period_s`` (s), then switch
        pulsing on.

        Instruments commonly refuse a width that is not below the period at every step, so the
        two are sent in an order that never leaves them so: the width first if it is below
        the present period (read with ``pulse_period`` when the profile can), else the period
        first.
        """
        width = check_finite("width_s", width_s, positive=True)
        period = check_finite("period_s", period_s, positive=True)
        if not width < period:
            raise ValueError(f"width_s: {width_s!r} s is not below period_s {period_s!r} s")
        self._need_pulse_ops("set_pulse_width", "set_pulse_period", "pulse_on")
        present = float(self.session.query("pulse_period")) if self.session.has("pulse_period") else None
        if present is None or width < present:
            self.session.write("set_pulse_width", value=width)
            self.session.write("set_pulse_period", value=period)
        else:
            self.session.write("set_pulse_period", value=period)
            self.session.write("set_pulse_width", value=width)
        self.session.write("pulse_on")

    def pulse_width(self) -> float:
        """The width of the output's pulses (s)."""
        self._need_pulse_ops("pulse_width")
        return float(self.session.query("pulse_width"))

    def pulse_period(self) -> float:
        """The period of the output's pulses (s)."""
        self._need_pulse_ops("pulse_period")
        return float(self.session.query("pulse_period"))

    def pulsing(self) -> bool:
        """Whether pulsing is on."""
        self._need_pulse_ops("pulse_state")
        return bool(self.session.query("pulse_state"))

    def _need_pulse_ops(self, *ops: str) -> None:
        missing = [op for op in ops if not self.session.has(op)]
        if missing:
            raise ProfileError(
                self.session.profile.path,
                f"commands.{missing[0]}",
                f"profile {self.profile_name} cannot pulse the pump: it lacks "
                f"{', '.join('commands.' + op for op in missing)}; add them to [commands] "
                "(see drivers/roles.py, role pump)",
            )

    def power(self) -> float:
        """Optical output power from the driver's calibration (W)."""
        return float(self.session.query("power"))
