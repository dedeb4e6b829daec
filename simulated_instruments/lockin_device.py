"""The QL-7 lock-in amplifier's SCPI commands (role ``detector``, driver ``lockin``).

It digitises the probe photodiode (and the reference photodiode, for its second auxiliary
input) through the bench's detector model at `INPUT_RATE`, as the digitiser would, adds its
own input noise, removes the DC part (AC coupling, a one-pole high pass of `AC_COUPLING` s),
and multiplies by the reference: the pump driver's modulation output, a square wave whose
fundamental is taken as phase 0 (``theta = 2 pi f (t - t_ref) - pi/2``, ``t_ref`` a rising
edge). The products ``sqrt 2 v cos(theta)`` and ``-sqrt 2 v sin(theta)`` go through
``order`` equal one-pole RC low passes of the time constant: X and Y in V rms, so that an input
``A cos(theta + phi)`` reads ``X + i Y = (A / sqrt 2) exp(i phi)``. The auxiliary inputs
read the probe (1) and reference (2) levels through the same low pass. With no modulation
there is no reference: the mixers get nothing and X, Y decay to 0.

Overload: X, Y or R beyond the sensitivity (full scale) at any sample, or the AC-coupled input
beyond `INPUT_RANGE`, sets a status bit that ``STAT:OVLD?`` reads and clears (it reads 1 if
the overload happened since the last read or still holds); the outputs then stay at
+/- `OUTPUT_LIMIT` x sensitivity.

Samples are processed when a command arrives (the model is generated lazily, see
`shared_state`); if more than the sample memory went by unread, the filters run on the most
recent memory-full only, far longer than any time constant.

References
----------
.. [1] M. L. Meade, *Lock-in Amplifiers: Principles and Applications*, Peter Peregrinus, 1983,
   ch. 1 and 3 (phase-sensitive detection, AC coupling, RC output filters, overload).
.. [2] J. H. Scofield, "Frequency-domain description of a lock-in amplifier", Am. J. Phys. 62,
   129 (1994).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy.signal import lfilter

from simulated_instruments.device_errors import ILLEGAL_VALUE, OUT_OF_RANGE, DeviceError
from simulated_instruments.optical_setup import TRUTH_FIELDS
from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    common_commands,
    expect,
    fmt,
    fmt_bool,
    integer,
    number,
    unquote,
)
from simulated_instruments.setup_config import SimulatorSetupError
from simulated_instruments.shared_state import BenchCore

IDENTITY = "Quillmoor Instruments,QL-7,QL7S0112,1.0.2"
#: Samples per second of its input converter. The medium's response to a square wave has
#: harmonics falling as 1/k^2; sampled with no anti-alias filter, those at fs/f +/- 1 land on the
#: fundamental. At 100 kHz they shift the phase at 500 Hz by under 0.1 mrad (at 20 kHz by 1.5 mrad,
#: which biased a five-frequency lifetime fit by 1 %).
INPUT_RATE = 100e3
#: Front end full scale of the model's converter, V (the photodiode levels stay well inside).
CONVERTER_RANGE = 10.0
#: Its own input noise, V rms per sample (on top of the photodiodes' noise).
INPUT_NOISE = 20e-6
#: AC-coupling time constant, s (corner 0.016 Hz).
AC_COUPLING = 10.0
#: The AC-coupled input overloads beyond this, V.
INPUT_RANGE = 1.0
#: Outputs are held within this many full scales when overloaded.
OUTPUT_LIMIT = 1.1
#: Sensitivities (full scale of X, Y, R), V rms: 1-2-5 from 1 uV to 1 V.
SENSITIVITIES = tuple(m * 10.0**e for e in range(-6, 0) for m in (1.0, 2.0, 5.0)) + (1.0,)
#: Time constants, s: 1-3 from 100 us to 30 s.
TIME_CONSTANTS = tuple(m * 10.0**e for e in range(-4, 2) for m in (1.0, 3.0))
ORDERS = (1, 2, 3, 4)
AUX_INPUTS = (1, 2)  # probe, reference photodiode


class LockInDevice:
    """Settings, filter state and command table of the QL-7 (see COMMANDS.md)."""

    def __init__(self, core: BenchCore, inject: Callable[[str], None] | None = None):
        self.core = core
        self._inject = inject
        self.errors = core.errors["detector"]
        self._rng = np.random.default_rng([core.model.seed, 7])
        self.table = CommandTable(
            common_commands(IDENTITY, self._reset, self.errors)
            + [
                Command("SNAP:XY", query=self._xy),
                Command("SNAP:RTHeta", query=self._rtheta),
                Command("SENSe:TCONstant", set=self._set_tc, query=self._tc),
                Command("SENSe:FILTer:ORDer", set=self._set_order, query=self._order),
                Command("SENSe:SENSitivity", set=self._set_sens, query=self._sens),
                Command("REFerence:FREQuency", query=self._freq),
                Command("AUX:READ", query=self._aux),
                Command("STATus:OVLD", query=self._ovld),
                Command("SYSTem:TIME", query=self._time),
                Command("SIMulation:TRUTh", query=self._truth),
                Command("SIMulation:FAULt", set=self._fault),
            ]
        )
        with core.lock:
            core.sync()
            core.model.set_range(CONVERTER_RANGE)
            core.start_acquisition(INPUT_RATE)
        self._power_on()

    def _power_on(self) -> None:
        self.time_constant = 0.1
        self.order = 2
        self.sensitivity = 10e-3
        self._stages = np.zeros((4, 4))  # (X, Y, aux 1, aux 2) x up to 4 poles
        self._dc: float | None = None  # AC coupling's running DC level of the probe input
        self._overload = False

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors, before=self._sync)

    # -- signal processing -------------------------------------------------------------------
    def _sync(self) -> None:
        core = self.core
        core.sync()
        ring = core.ring
        if ring.waiting == 0:
            return
        data, first = ring.read(ring.waiting)
        model = core.model
        times = model.acquisition_start + (first + np.arange(data.shape[0])) / INPUT_RATE
        self._process(times, data[:, 0].astype(np.float64), data[:, 1].astype(np.float64))

    def _process(self, times: np.ndarray, probe: np.ndarray, reference: np.ndarray) -> None:
        probe = probe + self._rng.normal(0.0, INPUT_NOISE, probe.size)
        # AC coupling: subtract a one-pole low pass of the input (started at the first sample)
        if self._dc is None:
            self._dc = float(probe[0])
            # the instrument has been on for long before: its auxiliary inputs' filters hold
            # the levels already, not zero
            self._stages[2, :] = probe[0]
            self._stages[3, :] = reference[0]
        beta = math.exp(-1.0 / (INPUT_RATE * AC_COUPLING))
        dc, zf = lfilter([1.0 - beta], [1.0, -beta], probe, zi=[beta * self._dc])
        self._dc = float(zf[0] / beta)
        ac = probe - dc
        wave = self.core.model.pump.modulation
        if wave is None:
            mix_x = mix_y = np.zeros_like(ac)
        else:
            theta = 2.0 * math.pi * wave.frequency * (times - wave.t_ref) - math.pi / 2.0
            mix_x = math.sqrt(2.0) * ac * np.cos(theta)
            mix_y = -math.sqrt(2.0) * ac * np.sin(theta)
        alpha = 1.0 - math.exp(-1.0 / (INPUT_RATE * self.time_constant))
        outputs = []
        for row, signal in enumerate((mix_x, mix_y, probe, reference)):
            y = signal
            for k in range(self.order):
                y, zf = lfilter([alpha], [1.0, alpha - 1.0], y, zi=[(1.0 - alpha) * self._stages[row, k]])
                self._stages[row, k] = y[-1]
            outputs.append(y)
        x, yq = outputs[0], outputs[1]
        limit = self.sensitivity
        if np.max(np.abs(ac)) > INPUT_RANGE or np.max(np.hypot(x, yq)) > limit:
            self._overload = True
        hold = OUTPUT_LIMIT * limit
        for row in (0, 1):
            self._stages[row, : self.order] = np.clip(self._stages[row, : self.order], -hold, hold)

    def _outputs(self) -> tuple[float, float]:
        k = self.order - 1
        return float(self._stages[0, k]), float(self._stages[1, k])

    def _now_overloaded(self) -> bool:
        x, y = self._outputs()
        return math.hypot(x, y) > self.sensitivity

    # -- commands ---------------------------------------------------------------------------
    def _reset(self) -> None:
        self._power_on()

    def _xy(self, params: list[str]) -> str:
        expect(params, 0)
        x, y = self._outputs()
        return f"{x:.7g},{y:.7g}"

    def _rtheta(self, params: list[str]) -> str:
        expect(params, 0)
        x, y = self._outputs()
        return f"{math.hypot(x, y):.7g},{math.degrees(math.atan2(y, x)):.6g}"

    def _set_tc(self, params: list[str]) -> None:
        value = number(expect(params, 1)[0])
        if not (math.isfinite(value) and TIME_CONSTANTS[0] / 2 <= value <= TIME_CONSTANTS[-1] * 2):
            raise DeviceError(
                OUT_OF_RANGE, f"time constant {TIME_CONSTANTS[0]:g} ... {TIME_CONSTANTS[-1]:g} s"
            )
        self.time_constant = min(TIME_CONSTANTS, key=lambda tc: abs(math.log(tc / value)))

    def _tc(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.time_constant)

    def _set_order(self, params: list[str]) -> None:
        value = integer(expect(params, 1)[0])
        if value not in ORDERS:
            raise DeviceError(ILLEGAL_VALUE, "filter order 1 ... 4")
        # new poles start from the present output, so the output does not jump
        self._stages[:, self.order : value] = self._stages[:, self.order - 1 : self.order]
        self.order = value

    def _order(self, params: list[str]) -> str:
        expect(params, 0)
        return str(self.order)

    def _set_sens(self, params: list[str]) -> None:
        value = number(expect(params, 1)[0])
        if not (math.isfinite(value) and 0 < value <= SENSITIVITIES[-1] * (1 + 1e-9)):
            raise DeviceError(OUT_OF_RANGE, "sensitivity 1 uV ... 1 V")
        self.sensitivity = next(s for s in SENSITIVITIES if s >= value * (1 - 1e-9))

    def _sens(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.sensitivity)

    def _freq(self, params: list[str]) -> str:
        expect(params, 0)
        wave = self.core.model.pump.modulation
        return fmt(0.0 if wave is None else wave.frequency)

    def _aux(self, params: list[str]) -> str:
        n = integer(expect(params, 1)[0])
        if n not in AUX_INPUTS:
            raise DeviceError(ILLEGAL_VALUE, "auxiliary input 1 or 2")
        return fmt(float(self._stages[1 + n, self.order - 1]))

    def _ovld(self, params: list[str]) -> str:
        expect(params, 0)
        latched = self._overload or self._now_overloaded()
        self._overload = False
        return fmt_bool(latched)

    def _time(self, params: list[str]) -> str:
        expect(params, 0)
        return fmt(self.core.acquisition_time())

    def _truth(self, params: list[str]) -> str:
        expect(params, 0)
        tr = self.core.model.truth()
        tr["t"] = self.core.acquisition_time()
        return ",".join(fmt(tr[k]) for k in TRUTH_FIELDS)

    def _fault(self, params: list[str]) -> None:
        if self._inject is None:
            raise DeviceError(ILLEGAL_VALUE, "faults are not available here")
        try:
            self._inject(unquote(",".join(params)))
        except SimulatorSetupError as exc:
            raise DeviceError(ILLEGAL_VALUE, str(exc)) from None
