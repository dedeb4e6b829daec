"""The QW-1 tunable probe source's SCPI commands (role ``wavelength``), on the shared core."""

from __future__ import annotations

from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    common_commands,
    expect,
    fmt,
    fmt_bool,
    number,
)
from simulated_instruments.shared_state import BenchCore

IDENTITY = "Quillmoor Instruments,QW-1,QW1S0042,1.0.7"


class WavelengthSource:
    """Command table of the QW-1 (see COMMANDS.md and `lineshape`)."""

    def __init__(self, core: BenchCore):
        self.core = core
        self.errors = core.errors["wavelength"]
        self.table = CommandTable(
            common_commands(IDENTITY, self._reset, self.errors)
            + [
                Command("[SOURce]:WAVelength:RANGe", query=self._range),
                Command("[SOURce]:WAVelength", set=self._set, query=self._get),
                Command("STATus:SETTled", query=self._settled),
            ]
        )

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors, before=self.core.sync)

    def _reset(self) -> None:
        self.core.model.set_probe_wavelength(self.core.model.cfg.probe.wavelength)

    def _set(self, params: list[str]) -> None:
        self.core.model.set_probe_wavelength(number(expect(params, 1)[0]))

    def _get(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.probe_wavelength)

    def _range(self, params: list[str]) -> str:
        expect(params, 0)
        lo, hi = self.core.model.wavelength_range()
        return f"{fmt(lo)},{fmt(hi)}"

    def _settled(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt_bool(self.core.model.wavelength_settled())
