"""The QD-2 digitiser's SCPI commands (role ``detector``), bound to the shared bench core."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from simulated_instruments.device_errors import ILLEGAL_VALUE, OUT_OF_RANGE, SETTINGS_CONFLICT, DeviceError
from simulated_instruments.optical_setup import DEFAULT_RANGE, DEFAULT_SAMPLE_RATE, RATE_RANGE, TRUTH_FIELDS
from simulated_instruments.ring_buffer import CAPACITY
from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    channel_list,
    common_commands,
    definite_block,
    expect,
    fmt,
    integer,
    number,
    unquote,
)
from simulated_instruments.setup_config import SimulatorSetupError
from simulated_instruments.shared_state import BenchCore

IDENTITY = "Quillmoor Instruments,QD-2,QD2S0417,1.3.0"
CHANNELS = 3
FORMATS = {"ASC": "ASC", "ASCII": "ASC", "REAL,32": "REAL,32"}


class Digitiser:
    """Settings of the QD-2 and its command table (see COMMANDS.md)."""

    def __init__(self, core: BenchCore, inject: Callable[[str], None] | None = None):
        self.core = core
        self._inject = inject
        self.errors = core.errors["detector"]
        self._power_on()
        self.table = CommandTable(
            common_commands(IDENTITY, self._reset, self.errors)
            + [
                Command("CONFigure:RATE", set=self._set_rate, query=self._rate),
                Command("ROUTe:SCAN", set=self._set_scan, query=self._scan),
                Command("SENSe:VOLTage:RANGe", set=self._set_range, query=self._range),
                Command("FORMat[:DATA]", set=self._set_format, query=self._format),
                Command("INITiate[:IMMediate]", set=self._init),
                Command("ABORt", set=self._abort),
                Command("FETCh:POSition", query=self._position),
                Command("FETCh:DATA", query=self._fetch),
                Command("FETCh:LOST", query=self._lost),
                Command("SYSTem:TIME", query=self._time),
                Command("SIMulation:TRUTh", query=self._truth),
                Command("SIMulation:FAULt", set=self._fault),
            ]
        )

    def _power_on(self) -> None:
        self.rate = DEFAULT_SAMPLE_RATE
        self.scan = [1, 2, 3]
        self.format = "ASC"
        self.core.model.set_range(DEFAULT_RANGE)

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors, before=self.core.sync)

    # -- settings ------------------------------------------------------------------------------
    def _reset(self) -> None:
        self.core.model.stop_acquisition()
        self.core.ring.clear(self.core.ring.write_index)
        self._power_on()

    def _set_rate(self, params: list[str]) -> None:
        hz = number(expect(params, 1)[0])
        lo, hi = RATE_RANGE
        if not lo <= hz <= hi:
            raise DeviceError(OUT_OF_RANGE)
        if self.core.model.acquiring:
            raise DeviceError(SETTINGS_CONFLICT, "send ABOR before changing the rate")
        self.rate = hz

    def _rate(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.rate)

    def _set_scan(self, params: list[str]) -> None:
        # the channel list holds commas inside its parentheses, so it arrives as one parameter
        self.scan = channel_list(expect(params, 1)[0], CHANNELS)

    def _scan(self, params: list[str]) -> str:
        expect(params, 0)
        return "(@" + ",".join(str(c) for c in self.scan) + ")"

    def _set_range(self, params: list[str]) -> None:
        self.core.model.set_range(number(expect(params, 1)[0]))

    def _range(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.full_scale)

    def _set_format(self, params: list[str]) -> None:
        key = ",".join(p.strip().upper() for p in params)
        if key not in FORMATS:
            raise DeviceError(ILLEGAL_VALUE, "expected ASC or REAL,32")
        self.format = FORMATS[key]

    def _format(self, params: list[str]) -> str:
        expect(params, 0)
        return self.format

    # -- acquisition ---------------------------------------------------------------------------
    def _init(self, params: list[str]) -> None:
        expect(params, 0)
        self.core.start_acquisition(self.rate)

    def _abort(self, params: list[str]) -> None:
        expect(params, 0)
        self.core.model.stop_acquisition()

    def _position(self, params: list[str]) -> str:
        expect(params, 0)
        return str(self.core.ring.read_index)

    def _lost(self, params: list[str]) -> str:
        expect(params, 0)
        return str(self.core.ring.lost)

    def _time(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.acquisition_time())

    def _fetch(self, params: list[str]) -> bytes:
        n = integer(expect(params, 1)[0])
        if not 1 <= n <= CAPACITY:
            raise DeviceError(OUT_OF_RANGE, f"1 ... {CAPACITY} sample sets")
        data, _ = self.core.ring.read(n)
        cols = [c - 1 for c in self.scan]
        if cols != list(range(CHANNELS)):
            data = data[:, cols]
        if self.format == "REAL,32":
            return definite_block(np.ascontiguousarray(data, dtype="<f4"))
        values = data.ravel().tolist()
        return ",".join(f"{v:.7g}" for v in values).encode("ascii")

    # -- simulator only ------------------------------------------------------------------------
    def _truth(self, params: list[str]) -> str:
        expect(params, 0)
        tr = self.core.model.truth()
        t = self.core.acquisition_time()
        tr["t"] = t
        return ",".join(fmt(tr[k]) for k in TRUTH_FIELDS)

    def _fault(self, params: list[str]) -> None:
        if self._inject is None:
            raise DeviceError(ILLEGAL_VALUE, "faults are not available here")
        spec = unquote(",".join(params))
        try:
            self._inject(spec)
        except SimulatorSetupError as exc:
            raise DeviceError(ILLEGAL_VALUE, str(exc)) from None
