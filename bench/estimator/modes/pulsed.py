"""Pulsed mode: rectangular pump pulses, each read as one triggered shot of a scope.

Each detector block is one shot (`bench.run.scope_reader`): the record of probe, reference and
pump monitor around one pump pulse, with each sample's time from the trigger (the pulse's
rising edge) in the channel ``trigger_time``. Per shot:

* the transmission before the pulse, ``S_before``: the mean of ``S = (V_probe - dark_p) /
  (V_ref - dark_r)`` over the pre-trigger samples (``trigger_time < 0``). It is the shot's own
  pump-off reference, so slow drift of the probe or of the ratio cancels shot by shot; the
  pulse period must leave the medium many lifetimes to relax (the simulated demo: 16);
* the gain transient ``ln R(t) = ln(S(t) / S_before)`` (Beer-Lambert: ``ln R = (sigma_e +
  sigma_a) L <N2>`` relative to the state before the pulse);
* the decay after the pulse, from ``pulse_width`` + `FIT_DELAY` samples after the trigger to
  the end of the record, fitted with ``ln R(t) = ln R_peak exp(-(t - t_off) / tau_d)``
  (`bench.physics.fitting.fit_exponential_decay`; Koechner [1]_ sec. 1.4). With a
  rectangular pump pulse the excitation is largest when the pump switches off (``dN2/dt > 0``
  while it pumps, an exponential decay after), so the fitted amplitude at ``t_off =
  pulse_width`` is the peak ln R, free of the sample grid's offset from the edge.

Over shots: the mean transient (its sigma per sample from the scatter between shots), and the
fit of its decay gives the reported ``ln_ratio`` (peak ln R) and decay time. Their noise
sigma is the shot-to-shot scatter of the single-shot fits, ``std / sqrt(n)``: an honest
figure however the noise is correlated within a record. The peak's ``beta``, ``n2_per_m3``,
gain and gain coefficient follow from ``ln R_peak`` by `bench.estimator.figures.figures`
(which adds back the probe-held excitation and carries the configured uncertainties of the
cross-sections, density and length as systematic parts, and corrects pulsed probes with
Frantz-Nodvik [3]_). The decay time is corrected for the CW probe's own stimulated rate, as in
decay mode, to give ``tau_s``.

Stored energy density at the peak, ``stored_energy_j_per_m3 = E_zl <N2>_peak``: the energy an
excited ion holds above the ground state is that of the upper manifold above the lower one.
Ions pumped above the bottom of the upper manifold relax within picoseconds to its thermal
distribution (the pump photon's excess, the quantum defect, heats the host), so the energy kept
is close to the zero-line photon energy ``h c / lambda_zl`` (``sample.zero_line``), not the
pump photon's; the probe's (signal) photon is the part a pulse can extract, smaller again in a
quasi-three-level medium (Koechner [1]_ sec. 1.3 and 3.2, Svelto [2]_ sec. 6.3 on the
quantum defect). Without ``sample.zero_line`` the energy density is not given. The figure is
the length average over the probed volume.

Transmission before the pulse ``transmission_before`` (mean S_before, its sigma the scatter)
and the number of shots are reported too. Shots whose pump monitor shows no pulse (before the
guard emits) are skipped as warm-up, and so is a shot within ``step_settle_time`` of the guard's switching
the pump on (``emission_start``: the driver's current still ramps) or of a setting change.

References
----------
.. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.3, 1.4
   (rate equations, decay of the upper-state population) and 3.2 (stored energy).
.. [2] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 6.3 (quantum defect,
   pumping of quasi-three-level media).
.. [3] L. M. Frantz and J. S. Nodvik, "Theory of pulse propagation in a laser amplifier",
   J. Appl. Phys. 34, 2346 (1963).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, NamedTuple

import numpy as np

from bench.estimator.figures import common_flags, figures, quantity, snr_flags, wavelength_of
from bench.estimator.mode import EMISSION_SETTINGS, Mode, Skipped
from bench.estimator.modes.decay import _lifetime_from_decay
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Clock, Counts, EstimatorState, Frame
from bench.physics import fitting
from bench.records import TRIGGER_TIME, Estimate, Quantity

#: Samples after the pump's falling edge left out of the decay fit (the edge's own sample and
#: the pump monitor's fall).
FIT_DELAY = 2
#: Fewest pre-trigger samples a shot needs for its reference.
MIN_BEFORE = 10
#: Points of the mean transient kept in an estimate's ``extra`` (the record is thinned to it).
TRANSIENT_POINTS = 200
#: Single-shot figures kept in an estimate's ``extra`` (the latest).
SHOTS_KEPT = 200


class Shot(NamedTuple):
    """What one shot gives (``end``: the sample index of its last sample)."""

    end: int
    t: float  # run clock of the trigger, s (as the block's times place it)
    s_before: float
    peak: float  # fitted ln R at the pump's falling edge
    decay_time: float  # s
    ln_ratio: np.ndarray  # ln R(t) at every sample of the record
    trigger_time: np.ndarray


@dataclass(frozen=True, eq=False)
class Sums:
    """Accumulated shots (one for the window, one cumulative)."""

    n: int = 0
    lnr_sum: np.ndarray | None = None
    lnr_sq: np.ndarray | None = None
    trigger_time: np.ndarray | None = None
    s_before: tuple[float, ...] = ()
    peaks: tuple[float, ...] = ()
    decay_times: tuple[float, ...] = ()
    times: tuple[float, ...] = ()

    def plus(self, shot: Shot) -> Sums:
        if self.lnr_sum is None:
            total, sq = shot.ln_ratio.copy(), shot.ln_ratio**2
        else:
            total, sq = self.lnr_sum + shot.ln_ratio, self.lnr_sq + shot.ln_ratio**2
        return Sums(
            self.n + 1,
            total,
            sq,
            shot.trigger_time if self.trigger_time is None else self.trigger_time,
            self.s_before + (shot.s_before,),
            self.peaks + (shot.peak,),
            self.decay_times + (shot.decay_time,),
            self.times + (shot.t,),
        )


@dataclass(frozen=True)
class PulsedCore:
    window: Sums = Sums()
    cumulative: Sums = Sums()


def _width(settings: Mapping[str, Any]) -> float | None:
    w = settings.get("pulse_width")
    return float(w) if w is not None and w > 0 else None


def _decay_part(tt: np.ndarray, width: float, dt: float) -> np.ndarray:
    return tt >= width + FIT_DELAY * dt


def ingest(state: EstimatorState, core: PulsedCore, f: Frame, clock: Clock) -> tuple[PulsedCore, list]:
    end = f.i0 + f.n - 1
    width = _width(state.settings)
    tt = f.extra[TRIGGER_TIME]
    if width is None:
        return core, [Skipped(end, "skip")]
    if not f.settled.all():
        return core, [Skipped(end, "skip")]  # within the settle time of a setting change
    before = tt < 0.0
    during = (tt >= 0.0) & (tt < width)
    if np.count_nonzero(before) < MIN_BEFORE or not during.any():
        return core, [Skipped(end, "skip")]
    if not (f.on[during].mean() > 0.5) or f.on[before].any():
        return core, [Skipped(end, "warmup")]  # no pump pulse in this shot (not emitting yet)
    t_trigger = clock.time(f.i0) - float(tt[0])
    start = state.settings.get("emission_start")
    if start is not None and t_trigger < start + state.params.step_settle_time:
        return core, [Skipped(end, "warmup")]  # the pump's current still ramping up
    s_before = float(np.mean(f.s[before]))
    with np.errstate(divide="ignore", invalid="ignore"):
        lnr = np.log(f.s / s_before)
    tail = _decay_part(tt, width, clock.dt)
    if (
        not (math.isfinite(s_before) and s_before > 0 and np.isfinite(lnr).all())
        or np.count_nonzero(tail) < 5
    ):
        return core, [Skipped(end, "skip")]
    try:
        fit = fitting.fit_exponential_decay(tt[tail] - width, lnr[tail])
    except ValueError:
        return core, [Skipped(end, "skip")]
    peak, decay_time = (float(v) for v in fit.values)
    return core, [Shot(end, t_trigger, s_before, peak, decay_time, lnr, tt)]


def add(core: PulsedCore, item: Shot) -> PulsedCore:
    sums = core.cumulative
    if sums.trigger_time is not None and item.ln_ratio.shape != sums.lnr_sum.shape:
        return core  # a record of another length: the run's records must all be alike
    return PulsedCore(core.window.plus(item), sums.plus(item))


def reset_window(core: PulsedCore) -> PulsedCore:
    return dataclasses.replace(core, window=Sums())


def _scatter(values: tuple[float, ...]) -> float:
    """Standard error of the mean of ``values`` from their scatter."""
    return float(np.std(values, ddof=1)) / math.sqrt(len(values))


def _thinned(x: np.ndarray, k: int) -> list[float]:
    step = max(1, math.ceil(x.size / k))
    return [float(v) for v in x[::step]]


def _clock_ok(state: EstimatorState) -> bool:
    return state.clock is not None and state.clock.dt > 0


def estimate(state: EstimatorState, core: PulsedCore, scope: str, t: float, counts: Counts) -> Estimate:
    p = state.params
    sums = core.window if scope == "window" else core.cumulative
    wavelength = wavelength_of(state)
    width = _width(state.settings)
    values: dict[str, Quantity] = {}
    extra: dict[str, Any] = {"shots": sums.n, "skipped": counts.skipped}
    if sums.n >= 2 and width is not None and sums.lnr_sum is not None and _clock_ok(state):
        n = sums.n
        mean = sums.lnr_sum / n
        var = np.maximum(sums.lnr_sq / n - mean**2, 0.0) * n / (n - 1)
        sigma = np.sqrt(var / n)
        tt = sums.trigger_time
        tail = _decay_part(tt, width, state.clock.dt)
        peak_noise = _scatter(sums.peaks)
        decay_noise = _scatter(sums.decay_times)
        try:
            weights = np.where(sigma[tail] > 0, sigma[tail], np.max(sigma[tail]) or 1.0)
            fit = fitting.fit_exponential_decay(tt[tail] - width, mean[tail], weights)
            peak, decay_time = (float(v) for v in fit.values)
            fitted = True
        except ValueError:
            peak, decay_time = float(np.mean(sums.peaks)), float(np.mean(sums.decay_times))
            fitted = False
        values.update(figures(p, peak, peak_noise, wavelength))
        tau, tau_noise, probe_rate = _lifetime_from_decay(p, decay_time, decay_noise, wavelength)
        values["decay_time_s"] = quantity(decay_time, decay_noise)
        values["tau_s"] = quantity(tau, tau_noise)
        values["transmission_before"] = quantity(float(np.mean(sums.s_before)), _scatter(sums.s_before))
        n2 = values.get("n2_per_m3")
        if n2 is not None and p.zero_line_energy is not None:
            e = p.zero_line_energy
            values["stored_energy_j_per_m3"] = Quantity(
                e * n2.value, e * n2.sigma, e * n2.sigma_noise, e * n2.sigma_systematic
            )
        extra.update(
            fitted_mean_transient=fitted,
            pulse_width_s=width,
            probe_rate_per_s=probe_rate,
            zero_line_energy_j=p.zero_line_energy,
            transient={
                "t_s": _thinned(tt, TRANSIENT_POINTS),
                "ln_ratio": _thinned(mean, TRANSIENT_POINTS),
                "sigma": _thinned(sigma, TRANSIENT_POINTS),
            },
            per_shot=[
                {"t": a, "s_before": b, "ln_ratio_peak": c, "decay_time_s": d}
                for a, b, c, d in list(zip(sums.times, sums.s_before, sums.peaks, sums.decay_times))[
                    -SHOTS_KEPT:
                ]
            ],
        )
    flags = common_flags(state, t, counts, wavelength, uses_baseline=False)
    flags |= snr_flags(values, p, sums.n)
    return Estimate(
        t=t,
        mode=state.mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flags),
        n_samples=0 if sums.lnr_sum is None else sums.n * int(sums.lnr_sum.size),
        extra=MappingProxyType(extra),
    )


def new_core(params: EstimatorParams, settings: Mapping[str, Any], clock: Clock | None) -> PulsedCore:
    return PulsedCore()


MODE = Mode(
    name="pulsed",
    new_core=new_core,
    ingest=ingest,
    add=add,
    reset_window=reset_window,
    estimate=estimate,
    flush=lambda state: state,
    # shots are cut by the trigger, not by pump edges: no sample is left out after an edge
    settle=lambda params, settings: (0.0, 0.0),
    pump_steady=lambda settings: False,
    settings=("pulse_width", "pulse_period", *EMISSION_SETTINGS),
    channels=(TRIGGER_TIME,),
    words="pulsed: gain transient of each pump pulse on a triggered scope (peak beta, decay, stored energy)",
    cli_words="pulsed: pump pulses read shot by shot on a triggered scope (needs a scope bench; --shots)",
    describe="pulsed, pump pulses on a triggered scope",
)
