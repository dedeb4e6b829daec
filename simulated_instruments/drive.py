"""What the light sources do to the sample as functions of time, between two changes of setting.

A `Drive` is a frozen snapshot of the pump driver's current envelope (a linear soft-start ramp
then a constant), its square-wave modulation, the two shutters (open, shut or chopping) and the
probe's rate terms. It answers two kinds of question, both pure functions of time:

* for the medium: `Drive.segment` gives the constant inputs from ``t`` to the next change (a
  modulation or chopper edge, or the end of one short piece of a ramp), and `Drive.periodic`
  says whether the inputs repeat from ``t`` on (so a periodic steady state can be detected);
* for the detectors: `Drive.pump_power` and `Drive.probe_gate` are evaluated exactly at every
  sample time, vectorised.

Square waves are high (modulation: current at the setpoint; chopper: shutter open) during the
first half of each period, counted from their reference time. A pump pulse train is the same
wave with another duty cycle (`SquareWave.duty`): high for the pulse width at the start of
each period, so the medium sees rectangular pump pulses.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from simulated_instruments.medium import Inputs


@dataclass(frozen=True)
class SquareWave:
    """Rectangular wave, high during [t_ref + m/f, t_ref + (m + duty)/f).

    ``duty`` 0.5 (the default) is the modulation's square wave, computed as it always was
    (by half-periods); another duty cycle is a pump pulse train (pulse width = duty / f).
    """

    frequency: float  # Hz
    t_ref: float  # s, a rising edge
    duty: float = 0.5  # fraction of each period that is high, 0 < duty < 1

    def __post_init__(self) -> None:
        if not 0.0 < self.duty < 1.0:
            raise ValueError(f"duty: expected a fraction of the period between 0 and 1, got {self.duty!r}")

    @property
    def period(self) -> float:
        return 1.0 / self.frequency

    @property
    def width(self) -> float:
        """Seconds high in each period."""
        return self.duty / self.frequency

    def is_high(self, times: np.ndarray) -> np.ndarray:
        if self.duty == 0.5:
            halves = np.floor((times - self.t_ref) * (2.0 * self.frequency))
            return np.remainder(halves, 2.0) == 0.0
        phase = (np.asarray(times, dtype=float) - self.t_ref) * self.frequency
        return (phase - np.floor(phase)) < self.duty

    def high_at(self, t: float) -> bool:
        if self.duty == 0.5:
            return math.floor((t - self.t_ref) * 2.0 * self.frequency) % 2 == 0
        phase = (t - self.t_ref) * self.frequency
        return phase - math.floor(phase) < self.duty

    def next_edge(self, t: float) -> float:
        """The first edge strictly after ``t`` (edges closer than 1e-9 half-period count as at t)."""
        if self.duty == 0.5:
            half = 0.5 / self.frequency
            m = math.floor((t - self.t_ref) / half)
            edge = self.t_ref + (m + 1) * half
            while edge <= t + 1e-9 * half:
                m += 1
                edge = self.t_ref + (m + 1) * half
            return edge
        period = self.period
        tol = 1e-9 * 0.5 * period
        m = math.floor((t - self.t_ref) / period)
        while True:
            for edge in (self.t_ref + m * period, self.t_ref + m * period + self.width):
                if edge > t + tol:
                    return edge
            m += 1

    def last_edge(self, t: float) -> float:
        """The latest edge at or before ``t``."""
        if self.duty == 0.5:
            half = 0.5 / self.frequency
            return self.t_ref + math.floor((t - self.t_ref) / half) * half
        period = self.period
        start = self.t_ref + math.floor((t - self.t_ref) / period) * period
        fall = start + self.width
        return fall if fall <= t else start


@dataclass(frozen=True)
class Envelope:
    """Diode current envelope: linear from (t0, i0) to (t1, i1), then i1 (A)."""

    t0: float
    i0: float
    t1: float
    i1: float

    @staticmethod
    def constant(current: float, t: float = 0.0) -> Envelope:
        return Envelope(t, current, t, current)

    def ramping_at(self, t: float) -> bool:
        return t < self.t1 and self.i0 != self.i1

    def at(self, t):
        """Current at time(s) ``t`` (scalar or array)."""
        flat = self.t1 <= self.t0 or self.i0 == self.i1
        if isinstance(t, float):
            if flat or t >= self.t1:
                return self.i1
            return self.i0 + (self.i1 - self.i0) * max(0.0, (t - self.t0) / (self.t1 - self.t0))
        if flat:
            return np.full(np.shape(t), self.i1)
        frac = np.clip((np.asarray(t, dtype=float) - self.t0) / (self.t1 - self.t0), 0.0, 1.0)
        return self.i0 + (self.i1 - self.i0) * frac

    def peak_after(self, t: float) -> float:
        return max(float(self.at(t)), self.i1)

    def mean(self, ta: float, tb: float) -> float:
        """Mean current over [ta, tb]."""
        if tb <= ta:
            return float(self.at(ta))
        if self.t1 <= self.t0 or self.i0 == self.i1 or ta >= self.t1:
            return self.i1
        a_end = min(tb, self.t1)
        ramp_part = 0.5 * (float(self.at(ta)) + float(self.at(a_end))) * (a_end - ta)
        flat_part = self.i1 * max(0.0, tb - a_end)
        return (ramp_part + flat_part) / (tb - ta)


def mean_above(i_a: float, i_b: float, threshold: float) -> float:
    """Mean of max(0, i - threshold) over a linear segment from i_a to i_b (exact)."""
    lo, hi = min(i_a, i_b), max(i_a, i_b)
    if lo >= threshold:
        return 0.5 * (i_a + i_b) - threshold
    if hi <= threshold:
        return 0.0
    frac = (hi - threshold) / (hi - lo)
    return 0.5 * frac * (hi - threshold)


@dataclass(frozen=True)
class Gate:
    """A shutter: open, shut, or chopping (open during the high half of ``chop``)."""

    open: bool = True
    chop: SquareWave | None = None

    def is_open(self, times: np.ndarray) -> np.ndarray:
        if self.chop is not None:
            return self.chop.is_high(times)
        return np.full(np.shape(times), self.open)

    def open_at(self, t: float) -> bool:
        return self.chop.high_at(t) if self.chop is not None else self.open


@dataclass(frozen=True)
class Drive:
    """The sources' behaviour from the last change of setting on (see module docstring)."""

    envelope: Envelope
    modulation: SquareWave | None
    pump_gate: Gate
    probe_gate: Gate
    slope: float  # W/A
    threshold: float  # A
    flux_per_watt: float  # pump photons m^-2 s^-1 per W on the sample
    probe_up: float  # sigma_as Phi_s with the probe shutter open, 1/s
    probe_k: float  # (sigma_as + sigma_es) Phi_s with the probe shutter open, 1/s
    ramp_piece: float  # s, length of the constant pieces a ramp is cut into

    # -- which square waves matter -------------------------------------------------------------
    def _pump_can_emit(self, t: float) -> bool:
        if not self.pump_gate.open and self.pump_gate.chop is None:
            return False
        return self.envelope.peak_after(t) > self.threshold

    def _waves(self, t: float) -> list[SquareWave]:
        waves = []
        if self._pump_can_emit(t):
            if self.modulation is not None:
                waves.append(self.modulation)
            if self.pump_gate.chop is not None:
                waves.append(self.pump_gate.chop)
        if self.probe_gate.chop is not None and (self.probe_up > 0 or self.probe_k > 0):
            waves.append(self.probe_gate.chop)
        return waves

    def constant_after(self, t: float) -> bool:
        """True if the inputs never change after ``t``."""
        return not self.envelope.ramping_at(t) and not self._waves(t)

    def periodic(self, t: float) -> tuple[float, float] | None:
        """(period, reference time) if the inputs repeat from ``t`` on, else None.

        Periodic when no ramp is under way and every active square wave's period divides the
        longest one; the reference is a rising edge of that longest wave.
        """
        if self.envelope.ramping_at(t):
            return None
        waves = self._waves(t)
        if not waves:
            return None
        longest = max(waves, key=lambda w: w.period)
        for w in waves:
            ratio = longest.period / w.period
            if abs(ratio - round(ratio)) > 1e-9 * ratio:
                return None
        return longest.period, longest.t_ref

    def steady_for(self, t: float, since: float) -> float:
        """How long (s) the inputs have been constant at ``t``, given that this drive took over
        at ``since``: from the latest of ``since``, the end of the envelope's ramp and the last
        edge of every active square wave (0 while a ramp is under way)."""
        if self.envelope.ramping_at(t):
            return 0.0
        start = max(since, self.envelope.t1 if self.envelope.i0 != self.envelope.i1 else since)
        for wave in self._waves(t):
            start = max(start, wave.last_edge(t))
        return max(0.0, t - start)

    # -- inputs for the medium -----------------------------------------------------------------
    def segment(self, t: float) -> tuple[float, Inputs, bool]:
        """(t_next, inputs on [t, t_next), whether t_next is an edge rather than a ramp piece)."""
        t_next = math.inf
        edge = False
        env = self.envelope
        if env.ramping_at(t):
            j = math.floor((t - env.t0) / self.ramp_piece) + 1
            boundary = env.t0 + j * self.ramp_piece
            while boundary <= t + 1e-12 * self.ramp_piece:
                j += 1
                boundary = env.t0 + j * self.ramp_piece
            t_next = min(boundary, env.t1)
        for wave in self._waves(t):
            e = wave.next_edge(t)
            if e < t_next - 1e-9 * wave.period:
                t_next = e
                edge = True
            elif abs(e - t_next) <= 1e-9 * wave.period:
                edge = True
        end = t_next if math.isfinite(t_next) else t + 1.0
        return t_next, self.inputs_between(t, end), edge

    def inputs_between(self, ta: float, tb: float) -> Inputs:
        """Mean inputs over [ta, tb], where no edge falls inside (gates read at the middle)."""
        mid = 0.5 * (ta + tb)
        pump_w = 0.0
        if self.pump_gate.open_at(mid) and (self.modulation is None or self.modulation.high_at(mid)):
            # segments never straddle the end of a ramp, so the envelope is linear on [ta, tb]
            i_a = float(self.envelope.at(ta))
            i_b = float(self.envelope.at(tb))
            pump_w = self.slope * mean_above(i_a, i_b, self.threshold)
        probe_open = self.probe_gate.open_at(mid)
        return Inputs(
            pump_flux=pump_w * self.flux_per_watt,
            probe_up=self.probe_up if probe_open else 0.0,
            probe_k=self.probe_k if probe_open else 0.0,
        )

    # -- what the detectors see ----------------------------------------------------------------
    def diode_current(self, times: np.ndarray) -> np.ndarray:
        """Instantaneous diode current (A) at ``times`` (modulation included)."""
        current = np.asarray(self.envelope.at(times), dtype=float)
        if self.modulation is not None:
            current = np.where(self.modulation.is_high(times), current, 0.0)
        return current

    def pump_power(self, times: np.ndarray) -> np.ndarray:
        """Pump power (W) reaching the sample at ``times`` (after the pump shutter)."""
        power = self.slope * np.maximum(self.diode_current(times) - self.threshold, 0.0)
        if self.pump_gate.chop is not None or not self.pump_gate.open:
            power = np.where(self.pump_gate.is_open(times), power, 0.0)
        return power

    def probe_open(self, times: np.ndarray) -> np.ndarray:
        """True where the probe shutter lets the probe through."""
        return self.probe_gate.is_open(times)
