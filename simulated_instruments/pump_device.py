"""The QP-40 diode driver's SCPI commands (role ``pump``), bound to the shared bench core."""

from __future__ import annotations

from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    boolean,
    common_commands,
    expect,
    fmt,
    fmt_bool,
    number,
)
from simulated_instruments.shared_state import BenchCore

IDENTITY = "Quillmoor Instruments,QP-40,QP40S1123,2.1.4"
KELVIN = 273.15


class PumpDriverDevice:
    """Command table of the QP-40 (see COMMANDS.md); the state lives in the model."""

    def __init__(self, core: BenchCore):
        self.core = core
        self.errors = core.errors["pump"]
        model = core.model
        self.table = CommandTable(
            common_commands(IDENTITY, model.reset_pump, self.errors)
            + [
                Command("[SOURce]:CURRent:LIMit", set=self._set_limit, query=self._limit),
                Command("[SOURce]:CURRent[:LEVel]", set=self._set_current, query=self._setpoint),
                Command("MEASure:CURRent", query=self._measured_current),
                Command("MEASure:POWer", query=self._power),
                Command("MEASure:TEMPerature", query=self._temperature),
                Command("MEASure:TEMPerature:SAMPle", query=self._sample_temperature),
                Command("OUTPut:INTLock", query=self._interlock),
                Command("OUTPut[:STATe]", set=self._set_output, query=self._output),
                Command("[SOURce]:MODulation:FREQuency", set=self._set_mod_freq, query=self._mod_freq),
                Command("[SOURce]:MODulation[:STATe]", set=self._set_mod, query=self._mod),
                Command("[SOURce]:TEMPerature", set=self._set_temp, query=self._temp_setpoint),
                Command("[SOURce]:PULSe:WIDTh", set=self._set_pulse_width, query=self._pulse_width),
                Command("[SOURce]:PULSe:PERiod", set=self._set_pulse_period, query=self._pulse_period),
                Command("[SOURce]:PULSe[:STATe]", set=self._set_pulse, query=self._pulse),
            ]
        )

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors, before=self.core.sync)

    def _set_limit(self, params: list[str]) -> None:
        self.core.model.set_pump(limit=number(expect(params, 1)[0]))

    def _limit(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.pump.limit)

    def _set_current(self, params: list[str]) -> None:
        self.core.model.set_pump(current=number(expect(params, 1)[0]))

    def _setpoint(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.pump.setpoint)

    def _measured_current(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(round(self.core.model.pump_current(), 6))

    def _power(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(round(self.core.model.pump_optical_power(), 6))

    def _temperature(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(round(self.core.model.mount_temperature() - KELVIN, 3))

    def _sample_temperature(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(round(self.core.model.sample_temperature() - KELVIN, 4))

    def _interlock(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt_bool(self.core.model.pump.interlock_closed)

    def _set_output(self, params: list[str]) -> None:
        self.core.model.set_pump(on=boolean(expect(params, 1)[0]))

    def _output(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt_bool(self.core.model.pump_output_on)

    def _set_mod_freq(self, params: list[str]) -> None:
        self.core.model.set_modulation_frequency(number(expect(params, 1)[0]))

    def _mod_freq(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.pump.mod_frequency)

    def _set_mod(self, params: list[str]) -> None:
        self.core.model.set_modulation_enabled(boolean(expect(params, 1)[0]))

    def _mod(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt_bool(self.core.model.pump.mod_on)

    def _set_temp(self, params: list[str]) -> None:
        self.core.model.set_mount_setpoint(number(expect(params, 1)[0]) + KELVIN)

    def _temp_setpoint(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(round(self.core.model.pump.temp_setpoint - KELVIN, 6))

    def _set_pulse_width(self, params: list[str]) -> None:
        self.core.model.set_pulse_width(number(expect(params, 1)[0]))

    def _pulse_width(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.pump.pulse_width)

    def _set_pulse_period(self, params: list[str]) -> None:
        self.core.model.set_pulse_period(number(expect(params, 1)[0]))

    def _pulse_period(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.pump.pulse_period)

    def _set_pulse(self, params: list[str]) -> None:
        self.core.model.set_pulsing(boolean(expect(params, 1)[0]))

    def _pulse(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt_bool(self.core.model.pump.pulse_on)
