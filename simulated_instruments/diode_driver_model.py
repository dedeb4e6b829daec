"""The simulated QP-40 diode driver: current, output, interlock, modulation, mount temperature.

Pure state with explicit times (simulated seconds); no I/O. Behaviour (see also COMMANDS.md):

* Output on: the diode current ramps linearly from its present value to the setpoint in
  `RAMP_TIME` (20 ms); a new setpoint while on ramps the same way. Output off, an opening
  interlock or an over-temperature trip drop the current to zero at once.
* Optical power from the calibration of the bench file: P = slope (I - I_threshold), 0 below.
* Modulation: a 50 % square wave between the (ramped) current and zero, high first, its phase
  counted from the moment modulation is switched on (or its frequency changed).
* Mount temperature (first order, exact update): the TEC holds the mount at its setpoint when
  no current flows, and the diode's heat raises it by ``mount_heating`` x the mean current at
  steady state, T -> T_set + h <I>, with time constant ``thermal_time_constant``:
  T(t) = T_target + (T(t0) - T_target) exp(-(t - t0) / tau_th).
* Above `TRIP_TEMPERATURE` (45 °C) the driver switches its output off (error 202) and refuses
  to switch on. An injected TEC failure holds the mount at `FAULT_TEMPERATURE` (46 °C).
* Pulsing (width, period, on/off; width below the period, not together with modulation, -221
  otherwise): the output is a rectangular pulse train between the (ramped) current and zero,
  high for the width at the start of each period, its phase counted from the moment pulsing
  is switched on (or its width or period changed while pulsing). The driver's trigger output
  marks each pulse's rising edge while pulsing is on (whether or not the output is on). The
  current read back is the ramped level, as while modulating; the mount heats with the mean
  current (width / period of it).
"""

from __future__ import annotations

import math

from simulated_instruments.device_errors import (
    INTERLOCK_OPEN,
    OUT_OF_RANGE,
    OVER_TEMPERATURE,
    SETTINGS_CONFLICT,
    DeviceError,
)
from simulated_instruments.drive import Envelope, SquareWave
from simulated_instruments.setup_config import PumpSetup, SimulationSetup

RAMP_TIME = 20e-3  # s
TRIP_TEMPERATURE = 273.15 + 45.0  # K
FAULT_TEMPERATURE = 273.15 + 46.0  # K
LIMIT_RANGE = (0.0, 40.0)  # A
MODULATION_RANGE = (0.1, 10e3)  # Hz
SETPOINT_RANGE = (273.15 + 10.0, 273.15 + 40.0)  # K, mount temperature setpoint
POWER_ON_MODULATION = 1e3  # Hz
PULSE_WIDTH_RANGE = (1e-6, 1.0)  # s
PULSE_PERIOD_RANGE = (10e-6, 10.0)  # s
POWER_ON_PULSE_WIDTH = 1e-3  # s
POWER_ON_PULSE_PERIOD = 10e-3  # s


class DiodeDriverModel:
    """State of the diode driver (see module docstring); every method takes the time now."""

    def __init__(self, pump: PumpSetup, sim: SimulationSetup):
        self.slope = pump.slope_efficiency
        self.threshold = pump.threshold_current
        self.rating = pump.diode_current_rating
        self.heating = sim.mount_heating
        self.tau_thermal = sim.thermal_time_constant
        self.ambient = sim.ambient_temperature
        self.interlock_closed = True
        self.tec_failed = False
        self._temp = self.ambient
        self._temp_t = 0.0
        self.temp_setpoint = self.ambient
        self._power_on(0.0)

    def _power_on(self, t: float) -> None:
        self.limit = self.rating
        self.setpoint = 0.0
        self.output = False
        self.mod_on = False
        self.mod_frequency = POWER_ON_MODULATION
        self.mod_ref = t
        self.pulse_on = False
        self.pulse_width = POWER_ON_PULSE_WIDTH
        self.pulse_period = POWER_ON_PULSE_PERIOD
        self.pulse_ref = t
        self.envelope = Envelope.constant(0.0, t)

    def reset(self, t: float) -> None:
        """*RST: output off, setpoint 0 A, limit at the diode's rating, modulation and pulsing
        off, pulse settings at their power-on values."""
        self.advance_thermal(t)
        self._power_on(t)
        self.temp_setpoint = self.ambient

    # -- current ---------------------------------------------------------------------------
    def _ramp_to(self, t: float, target: float) -> None:
        present = float(self.envelope.at(t))
        self.envelope = (
            Envelope(t, present, t + RAMP_TIME, target) if present != target else Envelope.constant(target, t)
        )

    def set_setpoint(self, t: float, amps: float) -> None:
        if not (math.isfinite(amps) and 0.0 <= amps <= self.limit):
            raise DeviceError(
                OUT_OF_RANGE, f"current: setpoint {amps!r} A is not within 0 ... {self.limit:g} A (the limit)"
            )
        self.advance_thermal(t)
        self.setpoint = float(amps)
        if self.output:
            self._ramp_to(t, self.setpoint)

    def set_limit(self, t: float, amps: float) -> None:
        lo, hi = LIMIT_RANGE
        if not (math.isfinite(amps) and lo <= amps <= hi):
            raise DeviceError(OUT_OF_RANGE, f"limit: {amps!r} A is not within {lo:g} ... {hi:g} A")
        self.advance_thermal(t)
        self.limit = float(amps)
        if self.setpoint > self.limit:
            self.setpoint = self.limit
            if self.output:
                self._ramp_to(t, self.setpoint)

    def set_output(self, t: float, on: bool) -> None:
        self.advance_thermal(t)
        if on:
            if not self.interlock_closed:
                raise DeviceError(INTERLOCK_OPEN, "on: refused while the interlock is open")
            if self.temperature(t) > TRIP_TEMPERATURE:
                raise DeviceError(OVER_TEMPERATURE, "on: refused while the mount is above 45 degC")
            if not self.output:
                self.output = True
                self._ramp_to(t, self.setpoint)
        else:
            self._switch_off(t)

    def _switch_off(self, t: float) -> None:
        self.output = False
        self.envelope = Envelope.constant(0.0, t)

    def set_interlock(self, t: float, closed: bool) -> list[int]:
        """The interlock input changes; returns the errors the driver pushes (201 if it trips)."""
        self.advance_thermal(t)
        errors = []
        if not closed and self.output:
            self._switch_off(t)
            errors.append(INTERLOCK_OPEN)
        self.interlock_closed = bool(closed)
        return errors

    def set_modulation(self, t: float, on: bool) -> None:
        if on and self.pulse_on:
            raise DeviceError(SETTINGS_CONFLICT, "on: modulation refused while pulsing")
        self.advance_thermal(t)
        if on and not self.mod_on:
            self.mod_ref = t
        self.mod_on = bool(on)

    def set_modulation_frequency(self, t: float, hz: float) -> None:
        lo, hi = MODULATION_RANGE
        if not (math.isfinite(hz) and lo <= hz <= hi):
            raise DeviceError(OUT_OF_RANGE, f"hz: modulation {hz!r} Hz is not within {lo:g} ... {hi:g} Hz")
        self.advance_thermal(t)
        self.mod_frequency = float(hz)
        self.mod_ref = t

    # -- pulsing -----------------------------------------------------------------------------
    def set_pulse_width(self, t: float, seconds: float) -> None:
        lo, hi = PULSE_WIDTH_RANGE
        if not (math.isfinite(seconds) and lo <= seconds <= hi):
            raise DeviceError(OUT_OF_RANGE, f"width: {seconds!r} s is not within {lo:g} ... {hi:g} s")
        if seconds >= self.pulse_period:
            raise DeviceError(
                SETTINGS_CONFLICT, f"width: {seconds!r} s is not below the period {self.pulse_period:g} s"
            )
        self.advance_thermal(t)
        self.pulse_width = float(seconds)
        self.pulse_ref = t

    def set_pulse_period(self, t: float, seconds: float) -> None:
        lo, hi = PULSE_PERIOD_RANGE
        if not (math.isfinite(seconds) and lo <= seconds <= hi):
            raise DeviceError(OUT_OF_RANGE, f"period: {seconds!r} s is not within {lo:g} ... {hi:g} s")
        if seconds <= self.pulse_width:
            raise DeviceError(
                SETTINGS_CONFLICT, f"period: {seconds!r} s is not above the width {self.pulse_width:g} s"
            )
        self.advance_thermal(t)
        self.pulse_period = float(seconds)
        self.pulse_ref = t

    def set_pulsing(self, t: float, on: bool) -> None:
        if on and self.mod_on:
            raise DeviceError(SETTINGS_CONFLICT, "on: pulsing refused while modulating")
        self.advance_thermal(t)
        if on and not self.pulse_on:
            self.pulse_ref = t
        self.pulse_on = bool(on)

    @property
    def modulation(self) -> SquareWave | None:
        return SquareWave(self.mod_frequency, self.mod_ref) if self.mod_on else None

    @property
    def pulse_train(self) -> SquareWave | None:
        """The pulse train while pulsing (a `SquareWave` of duty width / period), else None."""
        if not self.pulse_on:
            return None
        return SquareWave(1.0 / self.pulse_period, self.pulse_ref, duty=self.pulse_width / self.pulse_period)

    @property
    def waveform(self) -> SquareWave | None:
        """What shapes the output in time: the modulation, the pulse train, or None (CW)."""
        return self.modulation if self.mod_on else self.pulse_train

    def current(self, t: float) -> float:
        """The diode current the driver reads back (A): the ramped level, also while modulating."""
        return float(self.envelope.at(t)) if self.output else 0.0

    def optical_power(self, t: float) -> float:
        """Optical power from the driver's calibration at the present current (W)."""
        return self.slope * max(0.0, self.current(t) - self.threshold)

    def mean_current(self, ta: float, tb: float) -> float:
        """Time-averaged current over [ta, tb] (modulation counts half, pulsing its duty cycle),
        the thermal input."""
        if not self.output:
            return 0.0
        mean = self.envelope.mean(ta, tb)
        if self.mod_on:
            return 0.5 * mean
        if self.pulse_on:
            return mean * self.pulse_width / self.pulse_period
        return mean

    # -- mount temperature ------------------------------------------------------------------
    def _target(self, ta: float, tb: float) -> float:
        return self.temp_setpoint + self.heating * self.mean_current(ta, tb)

    def temperature(self, t: float) -> float:
        """Mount temperature (K) at ``t`` (no earlier than the last thermal update)."""
        if self.tec_failed:
            return FAULT_TEMPERATURE
        dt = max(0.0, t - self._temp_t)
        target = self._target(self._temp_t, t)
        return target + (self._temp - target) * math.exp(-dt / self.tau_thermal)

    def advance_thermal(self, t: float) -> None:
        """Fold the time up to ``t`` into the thermal state (call before any change of input)."""
        if t <= self._temp_t:
            return
        self._temp = self.temperature(t)
        self._temp_t = t

    def set_temperature_setpoint(self, t: float, kelvin: float) -> None:
        lo, hi = SETPOINT_RANGE
        if not (math.isfinite(kelvin) and lo <= kelvin <= hi):
            raise DeviceError(
                OUT_OF_RANGE, f"kelvin: mount setpoint {kelvin!r} K is not within {lo:g} ... {hi:g} K"
            )
        self.advance_thermal(t)
        self.temp_setpoint = float(kelvin)

    def trip_time(self, ta: float, tb: float) -> float | None:
        """When in (ta, tb] the mount crosses the trip temperature while emitting, else None."""
        if not self.output or self.tec_failed:
            return None
        t0 = self._temp_t
        target = self._target(t0, tb)
        start = self.temperature(ta)
        if start > TRIP_TEMPERATURE:
            return ta
        if target <= TRIP_TEMPERATURE:
            return None
        # T(t) = target + (T(t0) - target) exp(-(t - t0)/tau) reaches the trip level at:
        t_cross = t0 + self.tau_thermal * math.log((target - self._temp) / (target - TRIP_TEMPERATURE))
        if t_cross <= tb:
            return max(t_cross, ta)
        return None

    def over_temperature(self, t: float) -> list[int]:
        """The protection acts at ``t``: output off; returns the errors pushed (202)."""
        self.advance_thermal(t)
        if self.output:
            self._switch_off(t)
            return [OVER_TEMPERATURE]
        return []

    def fail_tec(self, t: float) -> list[int]:
        """Injected fault: the TEC fails and the mount sits at 46 °C; the driver trips."""
        self.advance_thermal(t)
        self.tec_failed = True
        self._temp = FAULT_TEMPERATURE
        self._temp_t = t
        return self.over_temperature(t) or []

    def restore_tec(self, t: float) -> None:
        """The TEC recovers; the mount relaxes from 46 °C towards its target."""
        self.tec_failed = False
        self._temp = FAULT_TEMPERATURE
        self._temp_t = t
