"""The QO-4 triggered oscilloscope's SCPI commands (role ``detector``, driver ``scope``).

Quillmoor Instruments is an invented maker; the QO-4 exists only here. Its three inputs are
the probe photodiode (1), the reference photodiode (2) and the pump monitor (3), sampled
through the bench's detector model every ``x_increment`` (`XINC`, 5 us at power-on) as the
digitiser would, with the scope's own input noise (`INPUT_NOISE` V rms per sample and
trigger) added. Its external trigger input is wired to the pump driver's trigger output: one
trigger at each rising edge of the pump's pulse train while pulsing is on
(`DiodeDriverModel.pulse_train`), none otherwise.

One acquisition: ``CAPT:ARM`` clears the last record and arms; the first trigger at least the
pre-trigger part (`PRETRIGGER` samples) after the arm starts the record, ``REC:LEN?`` samples
from ``PRETRIGGER`` samples before the first sample at or after the edge. With ``CAPT:MEAN n``
(n > 1) the records of n triggers are averaged, each trigger taken once the record before it
is complete and the pre-trigger part has filled again. Then ``CAPT:DONE?`` answers 1 and
``REC:CODE? n`` gives channel n's record as a definite-length block of codes (``REC:FORM``:
``I16``, little-endian int16, at power-on, or ``I8``), ``REC:SCAL? n`` its scaling
``x_increment, x_origin, y_scale, y_offset`` (volts = code * y_scale + y_offset; x_origin:
time of sample 0 from the trigger of the last averaged record, s, negative). Every channel
reads ``FULL_SCALE`` V either side of its offset (`OFFSETS`); codes beyond the range clip.

Simulator only: ``SIM:TRUTh?`` (the bench's truth, as the other detectors answer it) and
``SIM:TRUTh:PULSe?`` (`BenchModel.pulse_truth`: the latest pump pulse as the medium knows it,
its time ``pulse_t`` in s since the scope's own acquisition started, like ``SYST:TIME?``).

References
----------
.. [1] IEEE Std 488.2-1992, *Codes, Formats, Protocols, and Common Commands*, 8.7.9
   (definite length arbitrary block response data).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from simulated_instruments.device_errors import ILLEGAL_VALUE, OUT_OF_RANGE, SETTINGS_CONFLICT, DeviceError
from simulated_instruments.optical_setup import PULSE_TRUTH_FIELDS, TRUTH_FIELDS
from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    common_commands,
    definite_block,
    expect,
    fmt,
    fmt_bool,
    integer,
    number,
    unquote,
)
from simulated_instruments.setup_config import SimulatorSetupError
from simulated_instruments.shared_state import BenchCore

IDENTITY = "Quillmoor Instruments,QO-4,QO4S0031,0.9.4"
CHANNELS = 3
#: Power-on seconds per sample (its converter runs at 200 kHz).
XINC = 5e-6
XINC_RANGE = (1e-6, 1e-3)
#: Power-on samples per record and of them before the trigger.
LENGTH = 1000
PRETRIGGER = 200
LENGTH_RANGE = (16, 100_000)
#: Volts either side of each channel's offset; the offsets (V) centre the photodiode levels.
FULL_SCALE = 1.25
OFFSETS = (1.0, 1.0, 1.0)
#: The model's converter range in front of the scope's own (the photodiode levels stay inside).
CONVERTER_RANGE = 10.0
#: Its own input noise, V rms per sample and trigger.
INPUT_NOISE = 50e-6
MAX_AVERAGES = 65536
FORMATS = {"I16": (32767, "<i2"), "I8": (127, "i1")}


class ScopeDevice:
    """Settings, record and command table of the QO-4 (see the module doc and COMMANDS.md)."""

    def __init__(self, core: BenchCore, inject: Callable[[str], None] | None = None):
        self.core = core
        self._inject = inject
        self.errors = core.errors["detector"]
        self._rng = np.random.default_rng([core.model.seed, 11])
        self.table = CommandTable(
            common_commands(IDENTITY, self._reset, self.errors)
            + [
                Command("CAPTure:MEAN", set=self._set_mean, query=self._mean),
                Command("CAPTure:ARM", set=self._arm),
                Command("CAPTure:DONE", query=self._done),
                Command("RECord:CODE", query=self._code),
                Command("RECord:SCALing", query=self._scaling),
                Command("RECord:LENgth", set=self._set_length, query=self._length),
                Command("RECord:PRETrigger", set=self._set_pre, query=self._pre),
                Command("RECord:XINCrement", set=self._set_xinc, query=self._xinc),
                Command("RECord:FORMat", set=self._set_format, query=self._format),
                Command("SYSTem:TIME", query=self._time),
                Command("SIMulation:TRUTh", query=self._truth),
                Command("SIMulation:TRUTh:PULSe", query=self._pulse_truth),
                Command("SIMulation:FAULt", set=self._fault),
            ]
        )
        self._power_on()

    def _power_on(self) -> None:
        self.averages = 1
        self.length = LENGTH
        self.pretrigger = PRETRIGGER
        self.format = "I16"
        self._set_rate(XINC)
        self._disarm()
        self._codes: np.ndarray | None = None  # (length, channels) of the last acquisition
        self._x_origin = 0.0

    def _set_rate(self, xinc: float) -> None:
        core = self.core
        with core.lock:
            core.sync()
            core.model.set_range(CONVERTER_RANGE)
            core.start_acquisition(1.0 / xinc)
        self.xinc = xinc
        self._hist = np.empty((0, CHANNELS))
        self._h0 = 0  # absolute sample index of _hist[0]

    def _disarm(self) -> None:
        self.armed = False
        self.complete = False
        self._sum: np.ndarray | None = None
        self._count = 0
        self._ready = math.inf  # model time from which a trigger is taken

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors, before=self._sync)

    # -- acquisition ---------------------------------------------------------------------------
    def _sync(self) -> None:
        core = self.core
        core.sync()
        ring = core.ring
        if ring.waiting:
            data, first = ring.read(ring.waiting)
            data = np.asarray(data, dtype=np.float64)
            if first != self._h0 + self._hist.shape[0]:  # samples went by unread: start afresh
                self._hist, self._h0 = data, first
            else:
                self._hist = np.concatenate((self._hist, data))
        if self.armed and not self.complete:
            self._take_triggers()
        keep = self.length + 1
        if self._hist.shape[0] > keep:
            drop = self._hist.shape[0] - keep
            self._hist = self._hist[drop:]
            self._h0 += drop

    def _take_triggers(self) -> None:
        model = self.core.model
        wave = model.pump.pulse_train
        if wave is None:
            return
        rate = 1.0 / self.xinc
        t_acq = model.acquisition_start
        h1 = self._h0 + self._hist.shape[0]
        while not self.complete:
            m = math.ceil((self._ready - wave.t_ref) / wave.period - 1e-9)
            t_edge = wave.t_ref + m * wave.period
            first_after = math.ceil((t_edge - t_acq) * rate - 1e-9)
            start = first_after - self.pretrigger
            end = start + self.length
            if end > h1:
                return  # the record is not all in yet
            self._ready = t_edge + self.length * self.xinc  # busy, then the pre-trigger refills
            if start < self._h0:
                continue  # gone from the memory (a long silence between queries): skip it
            record = self._hist[start - self._h0 : end - self._h0]
            record = record + self._rng.normal(0.0, INPUT_NOISE, record.shape)
            self._sum = record if self._sum is None else self._sum + record
            self._count += 1
            self._x_origin = (t_acq + start / rate) - t_edge
            if self._count >= self.averages:
                top, _ = FORMATS[self.format]
                volts = self._sum / self._count
                scale = FULL_SCALE / top
                codes = np.rint((volts - np.array(OFFSETS)) / scale)
                self._codes = np.clip(codes, -top, top)
                self._codes_format = self.format
                self.complete = True

    # -- commands ---------------------------------------------------------------------------
    def _reset(self) -> None:
        self._power_on()

    def _set_mean(self, params: list[str]) -> None:
        n = integer(expect(params, 1)[0])
        if not 1 <= n <= MAX_AVERAGES:
            raise DeviceError(OUT_OF_RANGE, f"averages 1 ... {MAX_AVERAGES}")
        self.averages = n
        self._disarm()

    def _mean(self, params: list[str]) -> str:
        expect(params, 0)
        return str(self.averages)

    def _arm(self, params: list[str]) -> None:
        expect(params, 0)
        self._disarm()
        self._codes = None
        self.armed = True
        self._ready = self.core.model.t + self.pretrigger * self.xinc

    def _done(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt_bool(self.complete)

    def _channel(self, params: list[str]) -> int:
        n = integer(expect(params, 1)[0])
        if not 1 <= n <= CHANNELS:
            raise DeviceError(ILLEGAL_VALUE, f"channel 1 ... {CHANNELS}")
        return n

    def _code(self, params: list[str]) -> bytes:
        n = self._channel(params)
        if self._codes is None:
            raise DeviceError(SETTINGS_CONFLICT, "no complete acquisition to read")
        _, dtype = FORMATS[self._codes_format]
        return definite_block(np.ascontiguousarray(self._codes[:, n - 1], dtype=dtype))

    def _scaling(self, params: list[str]) -> str:
        n = self._channel(params)
        fmt_name = self._codes_format if self._codes is not None else self.format
        top, _ = FORMATS[fmt_name]
        return ",".join(fmt(v) for v in (self.xinc, self._x_origin, FULL_SCALE / top, OFFSETS[n - 1]))

    def _set_length(self, params: list[str]) -> None:
        n = integer(expect(params, 1)[0])
        lo, hi = LENGTH_RANGE
        if not lo <= n <= hi or n <= self.pretrigger:
            raise DeviceError(
                OUT_OF_RANGE, f"record length {lo} ... {hi} samples, above the pre-trigger part"
            )
        self.length = n
        self._disarm()

    def _length(self, params: list[str]) -> str:
        if params:  # a channel may be named: every channel has the same length
            self._channel(params)
        return str(self.length if self._codes is None else self._codes.shape[0])

    def _set_pre(self, params: list[str]) -> None:
        n = integer(expect(params, 1)[0])
        if not 0 <= n < self.length:
            raise DeviceError(OUT_OF_RANGE, "pre-trigger samples 0 ... record length - 1")
        self.pretrigger = n
        self._disarm()

    def _pre(self, params: list[str]) -> str:
        expect(params, 0)
        return str(self.pretrigger)

    def _set_xinc(self, params: list[str]) -> None:
        value = number(expect(params, 1)[0])
        lo, hi = XINC_RANGE
        if not (math.isfinite(value) and lo <= value <= hi):
            raise DeviceError(OUT_OF_RANGE, f"x increment {lo:g} ... {hi:g} s")
        self._disarm()
        self._set_rate(value)

    def _xinc(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.xinc)

    def _set_format(self, params: list[str]) -> None:
        name = expect(params, 1)[0].strip().upper()
        if name not in FORMATS:
            raise DeviceError(ILLEGAL_VALUE, "format I16 or I8")
        self.format = name

    def _format(self, params: list[str]) -> str:
        expect(params, 0)
        return self.format

    def _time(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.acquisition_time())

    # -- simulator only ------------------------------------------------------------------------
    def _truth(self, params: list[str]) -> str:
        expect(params, 0)
        tr = self.core.model.truth()
        tr["t"] = self.core.acquisition_time()
        return ",".join(fmt(tr[k]) for k in TRUTH_FIELDS)

    def _pulse_truth(self, params: list[str]) -> str:
        expect(params, 0)
        tr = self.core.model.pulse_truth()
        tr["pulse_t"] = tr["pulse_t"] - self.core.model.acquisition_start
        return ",".join(fmt(tr[k]) for k in PULSE_TRUTH_FIELDS)

    def _fault(self, params: list[str]) -> None:
        if self._inject is None:
            raise DeviceError(ILLEGAL_VALUE, "faults are not available here")
        try:
            self._inject(unquote(",".join(params)))
        except SimulatorSetupError as exc:
            raise DeviceError(ILLEGAL_VALUE, str(exc)) from None
