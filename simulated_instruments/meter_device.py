"""The QM-3 three-channel photodiode meter's SCPI commands (role ``detector``, polled).

The meter converts its three inputs together, continuously, `CONVERSION_RATE` times a second
(through the shared model's acquisition, into the bench core's sample memory). A reading
(``READ?``) is the mean of the last ``averages`` conversions before the command arrived, plus
the meter's own read-out noise (`READOUT_NOISE`, its own random stream), rounded to its
resolution (`RESOLUTION` of the range). Inputs clip at +-range (the model's converter).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from simulated_instruments.device_errors import ILLEGAL_VALUE, OUT_OF_RANGE, DeviceError
from simulated_instruments.optical_setup import TRUTH_FIELDS
from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    common_commands,
    expect,
    fmt,
    integer,
    number,
    unquote,
)
from simulated_instruments.setup_config import SimulatorSetupError
from simulated_instruments.shared_state import BenchCore

IDENTITY = "Quillmoor Instruments,QM-3,QM3S0082,2.0.1"
CHANNELS = 3
#: Conversions per second of every input.
CONVERSION_RATE = 10e3  # Hz
#: Input ranges, V (full scale; each is also a range of the shared converter model).
RANGES = (2.0, 10.0)
DEFAULT_RANGE = 10.0
AVERAGES = (1, 1000)
DEFAULT_AVERAGES = 20
#: Read-out noise added to every reading, V rms (after averaging).
READOUT_NOISE = 20e-6
#: Reading resolution, as a fraction of the range.
RESOLUTION = 1e-6
#: Seed offset of the meter's own noise stream (apart from the model's).
NOISE_STREAM = 0x4D33


class Meter:
    """Settings of the QM-3 and its command table (see COMMANDS.md)."""

    def __init__(self, core: BenchCore, inject: Callable[[str], None] | None = None):
        self.core = core
        self._inject = inject
        self.errors = core.errors["detector"]
        self._rng = np.random.default_rng([core.model.seed, NOISE_STREAM])
        self._power_on()
        self.table = CommandTable(
            common_commands(IDENTITY, self._power_on, self.errors)
            + [
                Command("READ", query=self._read_all),
                Command("READ:CHANnel", query=self._read_channel),
                Command("SENSe:AVERage:COUNt", set=self._set_averages, query=self._averages),
                Command("SENSe:VOLTage:RANGe", set=self._set_range, query=self._range),
                Command("SYSTem:TIME", query=self._time),
                Command("SIMulation:TRUTh", query=self._truth),
                Command("SIMulation:FAULt", set=self._fault),
            ]
        )

    def _power_on(self) -> None:
        """Power-on state (also ``*RST``): 10 V range, 20 averages, conversions from now."""
        self.averages = DEFAULT_AVERAGES
        self.core.model.set_range(DEFAULT_RANGE)
        self.core.start_acquisition(CONVERSION_RATE)
        self._recent = np.zeros((0, CHANNELS))

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors, before=self.core.sync)

    # -- settings ------------------------------------------------------------------------------
    def _set_averages(self, params: list[str]) -> None:
        n = integer(expect(params, 1)[0])
        lo, hi = AVERAGES
        if not lo <= n <= hi:
            raise DeviceError(OUT_OF_RANGE, f"{lo} ... {hi} conversions")
        self.averages = n

    def _averages(self, params: list[str]) -> str:
        expect(params, 0)
        return str(self.averages)

    def _set_range(self, params: list[str]) -> None:
        volts = number(expect(params, 1)[0])
        for r in RANGES:
            if abs(volts - r) <= 1e-9 * r:
                self.core.model.set_range(r)
                return
        raise DeviceError(ILLEGAL_VALUE, "expected a range of 2 or 10 V")

    def _range(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.model.full_scale)

    def _time(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.acquisition_time())

    # -- readings ------------------------------------------------------------------------------
    def _reading(self) -> np.ndarray:
        """The three inputs now: mean of the last ``averages`` conversions, noise, resolution."""
        ring = self.core.ring
        keep = AVERAGES[1]
        if ring.waiting > keep:  # older conversions are of no use to a reading
            ring.read_index = ring.write_index - keep
        new, _ = ring.read(ring.waiting)
        if new.shape[0]:
            self._recent = np.concatenate((self._recent, new.astype(np.float64)))[-keep:]
        if self._recent.shape[0] == 0:  # no conversion yet (just switched on)
            raise DeviceError(OUT_OF_RANGE, "no conversion finished yet")
        mean = self._recent[-self.averages :].mean(axis=0)
        mean += self._rng.standard_normal(CHANNELS) * READOUT_NOISE
        step = RESOLUTION * self.core.model.full_scale
        return np.rint(mean / step) * step

    def _read_all(self, params: list[str]) -> str:
        expect(params, 0)
        return ",".join(f"{v:.7e}" for v in self._reading())

    def _read_channel(self, params: list[str]) -> str:
        n = integer(expect(params, 1)[0])
        if not 1 <= n <= CHANNELS:
            raise DeviceError(OUT_OF_RANGE, f"channel 1 ... {CHANNELS}")
        return f"{self._reading()[n - 1]:.7e}"

    # -- simulator only ------------------------------------------------------------------------
    def _truth(self, params: list[str]) -> str:
        expect(params, 0)
        tr = self.core.model.truth()
        tr["t"] = self.core.acquisition_time()
        return ",".join(fmt(tr[k]) for k in TRUTH_FIELDS)

    def _fault(self, params: list[str]) -> None:
        if self._inject is None:
            raise DeviceError(ILLEGAL_VALUE, "faults are not available here")
        spec = unquote(",".join(params))
        try:
            self._inject(spec)
        except SimulatorSetupError as exc:
            raise DeviceError(ILLEGAL_VALUE, str(exc)) from None
