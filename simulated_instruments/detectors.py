"""The simulated photodiodes and digitiser front end: signals to quantised volts.

Pure numpy; the random generator is passed in, so the caller decides the seeding. Per sample
set, channel by channel (CH1 probe, CH2 reference, CH3 pump monitor):

* probe source: power x (1 + RIN) x common drift; RIN is white, ``relative_intensity_noise``
  rms per sample, and the same for probe and reference (both see the same source), so it
  cancels in their ratio. The common drift (``drift_per_hour``) and a differential drift of
  the probe/reference ratio (`DIFFERENTIAL_DRIFT` x ``drift_per_hour``, e.g. a slowly moving
  splitter) are smooth functions of time drawn from the seed (`SourceDrift`).
* probe volts = probe_signal x transmission relative to the unpumped sample x source x
  differential drift x shutter + dark_probe + noise; reference volts = reference_signal x source
  x shutter + dark_reference + noise; with shutter 1 shut both read dark + noise.
* pump monitor volts = pump_monitor_per_watt x pump power on the sample + noise (no offset).
* noise: white amplifier noise ``detector_noise`` rms on every channel, plus on the two
  photodiodes a shot-like term of variance `SHOT_COEFFICIENT` x signal volts (invented scale:
  about 0.09 mV rms at 0.8 V, well below the amplifier noise of the demo bench).
* ADC: inputs clip at +/- range; codes are ``adc_bits`` two's complement over +/- range, one
  step = 2 range / 2**adc_bits, so full scale reads range - 1 step.

References
----------
.. [1] P. C. D. Hobbs, *Building Electro-Optical Systems*, 2nd ed., Wiley, 2009, ch. 3
   (photodiode shot noise, amplifier noise, intensity noise and ratiometric cancellation).
"""

from __future__ import annotations

import math

import numpy as np

#: Differential drift of the probe/reference ratio, as a fraction of ``drift_per_hour``.
DIFFERENTIAL_DRIFT = 0.1
#: Shot-like noise variance per volt of signal, V (invented scale, see module docstring).
SHOT_COEFFICIENT = 1e-8
#: Drift is evaluated on a grid this fine and interpolated in between (it is slow), s.
DRIFT_GRID = 0.05
#: An input that stays within range this long (acquisition time) ends a clipping episode, s.
CLIP_HOLD = 10e-3


class SourceDrift:
    """A smooth relative drift: trend plus two slow sines, ``per_hour`` in size over an hour.

    ``factor(t) = 1 + per_hour (a t / 3600 s + sum_k b_k [sin(2 pi t / T_k + phi_k) - sin(phi_k)])``
    (1 at t = 0, so the bench file's signals are those at the start), with
    ``a`` of random sign and size 0.5 ... 1, ``b_k`` = 0.3 and periods ``T_k`` 10 ... 60 min, all
    drawn from ``rng`` at construction.
    """

    def __init__(self, per_hour: float, rng: np.random.Generator):
        if not (math.isfinite(per_hour) and per_hour >= 0):
            raise ValueError(f"per_hour: expected a non-negative number, got {per_hour!r}")
        self.per_hour = per_hour
        self.trend = float(rng.choice((-1.0, 1.0)) * rng.uniform(0.5, 1.0))
        self.periods = rng.uniform(600.0, 3600.0, size=2)
        self.phases = rng.uniform(0.0, 2 * math.pi, size=2)
        self.amplitudes = np.array([0.3, 0.3])

    def exact(self, t: np.ndarray) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        wander = sum(
            a * (np.sin(2 * math.pi * t / p + ph) - math.sin(ph))
            for a, p, ph in zip(self.amplitudes, self.periods, self.phases)
        )
        return 1.0 + self.per_hour * (self.trend * t / 3600.0 + wander)

    def factor(self, times: np.ndarray) -> np.ndarray:
        """Drift factor at sorted ``times``, linear between the points of a fixed grid.

        The grid (multiples of `DRIFT_GRID`) does not depend on how the samples are blocked.
        """
        if self.per_hour == 0.0 or times.size == 0:
            return np.ones(times.size)
        k0 = math.floor(float(times[0]) / DRIFT_GRID)
        k1 = math.floor(float(times[-1]) / DRIFT_GRID) + 1
        grid = np.arange(k0, k1 + 1) * DRIFT_GRID
        values = self.exact(grid)
        out = np.empty(times.size)
        cuts = np.searchsorted(times, grid[1:-1], side="left")
        lo = 0
        for cell, hi in enumerate(list(cuts) + [times.size]):
            if hi > lo:
                slope = (values[cell + 1] - values[cell]) / DRIFT_GRID
                seg = out[lo:hi]
                np.subtract(times[lo:hi], grid[cell], out=seg)
                seg *= slope
                seg += values[cell]
            lo = hi
        return out


def adc(volts: np.ndarray, full_scale: float, bits: int) -> np.ndarray:
    """Clip to +/- full_scale and quantise to ``bits``-bit two's complement codes (in place).

    Clipping the codes to [-2**(bits-1), 2**(bits-1) - 1] is clipping the volts to
    [-full_scale, full_scale - 1 step]: positive full scale reads one step short.
    """
    step = 2.0 * full_scale / (1 << bits)
    volts *= 1.0 / step
    np.rint(volts, out=volts)
    np.clip(volts, -(1 << (bits - 1)), (1 << (bits - 1)) - 1, out=volts)
    volts *= step
    return volts


def _photodiode(out: np.ndarray, signal, dark: float, noise: np.ndarray, amp_noise2: float) -> None:
    """out = signal + dark + sqrt(amp_noise^2 + SHOT_COEFFICIENT |signal|) x noise."""
    if np.ndim(signal) == 0:
        sigma = math.sqrt(amp_noise2 + SHOT_COEFFICIENT * abs(float(signal)))
        np.multiply(noise, sigma, out=out)
        out += float(signal) + dark
        return
    lo, hi = float(signal.min()), float(signal.max())
    if hi - lo <= 1e-3 * max(abs(hi), abs(lo)):
        # nearly constant signal: one sigma for the block (differs by < 1e-6 relative)
        sigma = math.sqrt(amp_noise2 + SHOT_COEFFICIENT * abs(0.5 * (lo + hi)))
        np.multiply(noise, sigma, out=out)
    else:
        np.abs(signal, out=out)
        out *= SHOT_COEFFICIENT
        out += amp_noise2
        np.sqrt(out, out=out)
        out *= noise
    out += signal
    out += dark


class DetectorModel:
    """Signals to volts for the three channels (see module docstring)."""

    def __init__(self, sim, rng: np.random.Generator, drift_rng: np.random.Generator):
        self.sim = sim
        self.rng = rng
        self.common = SourceDrift(sim.drift_per_hour, drift_rng)
        self.differential = SourceDrift(DIFFERENTIAL_DRIFT * sim.drift_per_hour, drift_rng)

    def volts(
        self, times: np.ndarray, ln_rel, probe_open, pump_w, stray: np.ndarray | None, full_scale: float
    ) -> tuple[np.ndarray, np.ndarray | None]:
        """(volts (n, 3) float64 after the ADC, clipped (n, 3) bool or None if nothing clipped).

        ``ln_rel`` is ln(T / T_unpumped) of the probe at each sample; ``probe_open`` 1 where
        shutter 1 is open, else 0; ``pump_w`` the pump power on the sample; each may be one
        number for the whole block. ``stray``: extra volts on the probe input, or None.
        """
        sim = self.sim
        n = times.size
        # drawn sample set by sample set, so any blocking of the same samples gives the same noise
        z = self.rng.standard_normal((n, 4))
        out = np.empty((3, n))  # channel rows; returned transposed, (n, 3)
        source = self.common.factor(times) if sim.drift_per_hour else np.ones(n)
        rin = out[2]  # scratch until the monitor is written
        np.multiply(z[:, 0], sim.relative_intensity_noise, out=rin)
        rin += 1.0
        source *= rin
        if np.ndim(probe_open) or not probe_open:
            source *= probe_open
        noise2 = sim.detector_noise**2
        # probe: transmission relative to the unpumped sample, differential drift
        if np.ndim(ln_rel):
            probe = np.exp(ln_rel)
            probe *= source
            probe *= sim.probe_signal
        else:
            probe = source * (sim.probe_signal * math.exp(float(ln_rel)))
        if sim.drift_per_hour:
            probe *= self.differential.factor(times)
        _photodiode(out[0], probe, sim.dark_probe, z[:, 1], noise2)
        source *= sim.reference_signal
        _photodiode(out[1], source, sim.dark_reference, z[:, 2], noise2)
        monitor = out[2]
        np.multiply(z[:, 3], sim.detector_noise, out=monitor)
        monitor += (
            np.asarray(pump_w) * sim.pump_monitor_per_watt
            if np.ndim(pump_w)
            else float(pump_w) * sim.pump_monitor_per_watt
        )
        if stray is not None:
            out[0] += stray
        clipped = None
        if n and (out.max() >= full_scale or out.min() <= -full_scale):
            clipped = (np.abs(out) >= full_scale).T
        adc(out, full_scale, sim.adc_bits)
        return out.T, clipped
