"""Lock-in mode: the pump square-wave modulated by its driver, the probe read by a lock-in.

Each polled reading holds the lock-in's X and Y (V rms, phase relative to the pump's
modulation), the reference frequency it is locked to and the probe's DC level (an auxiliary
input). A reading counts once the lock-in has locked and its output filter has settled after
the lock or a change of frequency: ``rc_settle_time(tc, order, 1e-5)`` of its time constant
and filter order (settings ``lockin_time_constant``, ``lockin_filter_order``, read back from the
instrument when the run starts). The figure of each reading is the complex ratio ``zeta = (X +
i Y) / (S_dc - dark)``, in which the probe power cancels.

ln R of the CW pumped state: the magnitude of the mean ratio, inverted exactly with the
medium's response at the modulation frequency (`bench.physics.ln_ratio_from_lockin_ratio`):
the excitation follows the square wave with ``k_on = 1/tau + W_s + <W_p>`` and ``k_off = 1/tau
+ W_s``, ``<W_p>`` the pump rate averaged over the sample's length after unbleached absorption.
That uniform rate is what the closed form takes; for a sample that absorbs much of the pump the
rate varies along it, and the mode flags ``thick_sample`` (unbleached pump absorbance above
`THICK_ABSORBANCE`). The uncertainty of tau and of the pump rate enters as a systematic part of
ln R. The measured phase is compared with the model's (flag ``phase_mismatch``): it does not
enter ln R, so an instrument phase offset costs nothing but the flag.

Noise: the readings come through the lock-in's RC filter, so readings closer than a few time
constants are correlated. The mean of the readings over a time T has the variance of ``N_eff =
2 ENBW T`` independent ones (`bench.physics.rc_noise_bandwidth`; at most the number of
readings), with the readings' scatter along the mean's direction, so ``sigma^2 = s^2 / (N_eff -
1)`` (the n/(n-1) correction with N_eff). Overload (an output beyond the lock-in's full scale)
flags the estimate (``overload``); it never trips the pump.

Several frequencies (``record --mode lockin --frequencies ...``): every change of the reference
frequency closes a point (frequency, mean X, Y, DC, ratio and its sigma, ln R) and starts a new
cumulative scope. With three points or more the lifetime is fitted to the ratios against
frequency (`bench.physics.fit_lifetime_from_lockin`: tau, ln R and the pump rate free), given as
``tau_s``, and the cumulative figures (ln R, beta, gain) are then the fit's ln R, with no
response-model systematic since tau and the pump rate are fitted; the points are in
``extra["points"]``.

References
----------
.. [1] M. L. Meade, *Lock-in Amplifiers: Principles and Applications*, Peter Peregrinus, 1983,
   ch. 3 (output filters: settling, equivalent noise bandwidth).
.. [2] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006, ch. 5
   (frequency-domain lifetime measurements).
.. [3] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989) (the error of a mean of
   correlated data).
"""

from __future__ import annotations

import cmath
import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, NamedTuple

import numpy as np

from bench import physics
from bench.estimator.figures import (
    common_flags,
    figures,
    pump_induced,
    quantity,
    snr_flags,
    wavelength_of,
    with_ln_ratio_systematic,
)
from bench.estimator.mode import EMISSION_SETTINGS, Mode
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Clock, Counts, EstimatorState, Frame
from bench.records import LOCKIN_X, LOCKIN_Y, OVERLOAD, PROBE, REFERENCE_HZ, Estimate

__all__ = ["MODE", "LockinCore", "Reading", "Sums", "response_rates", "SETTLE_TOLERANCE"]

#: The output filter has settled when what is left of a step is below this fraction of it.
SETTLE_TOLERANCE = 1e-5
#: A reference frequency that moved by more than this fraction is a new frequency (a new point).
FREQUENCY_CHANGE = 1e-3
#: Flag ``thick_sample`` above this unbleached pump absorbance (the pump rate then varies by
#: more than about 25 % along the sample; the response correction takes it as uniform).
THICK_ABSORBANCE = 0.3
#: Flag ``phase_mismatch`` when the measured phase is this far (rad) from the model's, beyond
#: four standard errors.
PHASE_TOLERANCE = 0.05
#: Points needed for the lifetime fit (tau, ln R and the pump rate are fitted).
FIT_POINTS = 3

#: What a lock-in run starts with when nothing is read back (one pole, 100 ms).
DEFAULT_TIME_CONSTANT = 0.1
DEFAULT_ORDER = 1


class Reading(NamedTuple):
    """One settled reading: its index and time, ``zeta = (X + iY) / S_dc``, X, Y, S_dc."""

    end: int
    t: float
    zr: float
    zi: float
    x: float
    y: float
    dc: float
    freq: float
    overload: bool


@dataclass(frozen=True)
class Sums:
    """Running sums of the readings of one scope (at one frequency)."""

    n: int = 0
    zr: float = 0.0
    zi: float = 0.0
    rr: float = 0.0
    ii: float = 0.0
    ri: float = 0.0
    x: float = 0.0
    y: float = 0.0
    dc: float = 0.0
    freq: float = 0.0
    overloads: int = 0
    t_first: float = math.nan
    t_last: float = math.nan

    def add(self, r: Reading) -> Sums:
        return Sums(
            self.n + 1,
            self.zr + r.zr,
            self.zi + r.zi,
            self.rr + r.zr * r.zr,
            self.ii + r.zi * r.zi,
            self.ri + r.zr * r.zi,
            self.x + r.x,
            self.y + r.y,
            self.dc + r.dc,
            self.freq + r.freq,
            self.overloads + int(r.overload),
            r.t if self.n == 0 else self.t_first,
            r.t,
        )

    @property
    def mean(self) -> complex:
        return complex(self.zr / self.n, self.zi / self.n)

    def spread(self) -> tuple[float, float]:
        """Population variances of the readings along and across the mean's direction."""
        z = self.mean
        phi = cmath.phase(z)
        a, b = math.cos(phi), math.sin(phi)
        n = self.n
        crr = self.rr / n - z.real**2
        cii = self.ii / n - z.imag**2
        cri = self.ri / n - z.real * z.imag
        along = a * a * crr + 2 * a * b * cri + b * b * cii
        across = b * b * crr - 2 * a * b * cri + a * a * cii
        return max(along, 0.0), max(across, 0.0)


@dataclass(frozen=True)
class LockinCore:
    freq: float = math.nan  # the reference frequency now (Hz); nan: not locked
    changed_at: int = -(2**62)  # index of the reading where it last changed
    win: Sums = Sums()
    cum: Sums = Sums()
    points: tuple[Mapping[str, Any], ...] = ()
    dt_sum: float = 0.0  # summed spacing of consecutive readings (s), for the mean poll interval
    dt_n: int = 0
    last_t: float = math.nan


def _filter(settings: Mapping[str, Any]) -> tuple[float, int]:
    tc = settings.get("lockin_time_constant") or DEFAULT_TIME_CONSTANT
    order = int(settings.get("lockin_filter_order") or DEFAULT_ORDER)
    return float(tc), order


def _settle(params: EstimatorParams, settings: Mapping[str, Any]) -> tuple[float, float]:
    tc, order = _filter(settings)
    medium = math.log(1.0 / SETTLE_TOLERANCE) / (1.0 / params.tau + params.probe_rate)
    s = float(physics.rc_settle_time(tc, order, SETTLE_TOLERANCE)) + medium
    return s, s


def _pump_on(block, params: EstimatorParams, settings: Mapping[str, Any]) -> np.ndarray:
    """The pump counts as on (modulated) while it emits and the lock-in is locked to a reference.

    The lock-in's reference comes from the modulation source, which runs whether or not the
    pump emits, so the reference alone cannot tell. ``emission_start`` and ``emission_stop``
    (run clock, s: the guard's last switch on and off, see `bench.run.consumer`) give the
    emitting interval ``[start, stop)``, open-ended while stop is before start. With neither
    known (an imported or older run) the reference alone decides.
    """
    locked = block.column(REFERENCE_HZ) > 0
    start, stop = settings.get("emission_start"), settings.get("emission_stop")
    if start is None and stop is None:
        return locked
    if start is None:
        return np.zeros_like(locked)
    t = block.times()
    emitting = t >= start
    if stop is not None and stop > start:
        emitting &= t < stop
    return locked & emitting


def response_rates(params: EstimatorParams, pump_power: float | None, tau: float | None = None):
    """``(k_on, k_off)`` in 1/s: ``1/tau + W_s`` plus, pumped, the length-averaged pump rate.

    ``<W_p> = W_p,back (e^A - 1) / A`` from `EstimatorParams.pump_rate_per_watt` (the rate at
    the back face after unbleached absorption ``A``; Beer-Lambert, Svelto sec. 2.4).
    """
    t = params.tau if tau is None else tau
    k_off = 1.0 / t + params.probe_rate
    p = 0.0 if pump_power is None or not pump_power > 0 else float(pump_power)
    a = params.pump_absorbance or 0.0
    mean_factor = math.expm1(a) / a if a > 0 else 1.0
    return k_off + params.pump_rate_per_watt * p * mean_factor, k_off


def _ingest(state: EstimatorState, core: LockinCore, f: Frame, clock: Clock) -> tuple[LockinCore, list]:
    freq = f.extra[REFERENCE_HZ]
    x, y = f.extra[LOCKIN_X], f.extra[LOCKIN_Y]
    over = f.extra[OVERLOAD]
    probe = f.extra[PROBE]
    dark = state.dark.probe if state.dark is not None else 0.0
    settle_n = int(math.ceil(_settle(state.params, state.settings)[0] / clock.dt - 1e-9))
    items: list = []
    for j in range(f.n):
        i = f.i0 + j
        fj = float(freq[j])
        t = clock.time(i)
        locked = fj > 0
        if locked and not (math.isfinite(core.freq) and abs(fj - core.freq) <= FREQUENCY_CHANGE * core.freq):
            core = _close_point(core)
            core = dataclasses.replace(core, freq=fj, changed_at=i, cum=Sums(), win=Sums())
        elif not locked and math.isfinite(core.freq):
            core = dataclasses.replace(_close_point(core), freq=math.nan, cum=Sums(), win=Sums())
        if math.isfinite(core.last_t) and t > core.last_t:
            core = dataclasses.replace(core, dt_sum=core.dt_sum + (t - core.last_t), dt_n=core.dt_n + 1)
        core = dataclasses.replace(core, last_t=t)
        if not (locked and f.on[j] and f.settled[j] and i >= core.changed_at + settle_n):
            continue
        dc = float(probe[j]) - dark
        if not (dc > 0 and math.isfinite(float(x[j])) and math.isfinite(float(y[j]))):
            continue
        items.append(
            Reading(
                i,
                t,
                float(x[j]) / dc,
                float(y[j]) / dc,
                float(x[j]),
                float(y[j]),
                dc,
                fj,
                bool(over[j] > 0.5),
            )
        )
    return core, items


def _add(core: LockinCore, item: Reading) -> LockinCore:
    return dataclasses.replace(core, win=core.win.add(item), cum=core.cum.add(item))


def _reset_window(core: LockinCore) -> LockinCore:
    return dataclasses.replace(core, win=Sums())


def _poll_interval(core: LockinCore) -> float:
    return core.dt_sum / core.dt_n if core.dt_n else math.nan


def _n_eff(sums: Sums, core: LockinCore, settings: Mapping[str, Any]) -> float:
    """Independent readings the scope's mean is worth (see the module doc)."""
    tc, order = _filter(settings)
    dt = _poll_interval(core)
    if not (dt > 0):
        return float(sums.n)
    span = sums.n * dt
    return float(min(sums.n, 2.0 * float(physics.rc_noise_bandwidth(tc, order)) * span))


def _figure(state: EstimatorState, core: LockinCore, sums: Sums) -> dict[str, Any] | None:
    """The ratio, its sigmas, the phases and ln R of a scope, or None without two readings."""
    if sums.n < 2:
        return None
    p = state.params
    z = sums.mean
    along, across = sums.spread()
    n_eff = _n_eff(sums, core, state.settings)
    if n_eff <= 1.0 or abs(z) == 0:
        return None
    # E[population variance] = sigma^2 (1 - 1/N_eff), so var(mean) = sigma^2 / N_eff = s^2 / (N_eff - 1)
    sig_along = math.sqrt(along / (n_eff - 1.0))
    sig_across = math.sqrt(across / (n_eff - 1.0))
    f_mean = sums.freq / sums.n
    power = state.settings.get("pump_power")
    k_on, k_off = response_rates(p, power)
    model = complex(physics.lockin_ratio(f_mean, k_on, k_off, 0.01))
    phase, model_phase = cmath.phase(z), cmath.phase(model)
    miss = math.remainder(phase - model_phase, 2 * math.pi)
    sign = 1.0 if abs(miss) <= math.pi / 2 else -1.0
    if sign < 0:
        miss = math.remainder(miss + math.pi, 2 * math.pi)
    q = sign * abs(z)
    lnr = physics.ln_ratio_from_lockin_ratio(q, f_mean, k_on, k_off)
    h = 1e-6 + 1e-4 * abs(lnr)
    slope = (
        abs(complex(physics.lockin_ratio(f_mean, k_on, k_off, lnr + h)))
        - abs(complex(physics.lockin_ratio(f_mean, k_on, k_off, lnr - h)))
    ) / (2 * h)
    sigma_lnr = sig_along / abs(slope) if slope else math.inf
    # systematic part: the response model's tau and pump rate at their configured uncertainties
    sys2 = 0.0
    for tau, wp_scale in ((p.tau * (1 + p.u_tau), 1.0), (p.tau, 1.0 + p.u_cross_sections)):
        kon, koff = response_rates(p, power, tau)
        kon = koff + (kon - koff) * wp_scale
        sys2 += (physics.ln_ratio_from_lockin_ratio(q, f_mean, kon, koff) - lnr) ** 2
    return {
        "frequency_hz": f_mean,
        "ratio": z,
        "ratio_sigma": math.hypot(sig_along, sig_across) / math.sqrt(2.0),
        "x_v": sums.x / sums.n,
        "y_v": sums.y / sums.n,
        "dc_v": sums.dc / sums.n,
        "phase_rad": phase,
        "model_phase_rad": model_phase,
        "phase_sigma_rad": sig_across / abs(z),
        "phase_off": abs(miss) > PHASE_TOLERANCE + 4.0 * sig_across / abs(z),
        "ln_ratio": lnr,
        "ln_ratio_sigma": sigma_lnr,
        "ln_ratio_sys": math.sqrt(sys2),
        "n_readings": sums.n,
        "n_eff": n_eff,
        "overloads": sums.overloads,
        "t_start": sums.t_first,
        "t_end": sums.t_last,
    }


def _point(fig: Mapping[str, Any]) -> dict[str, Any]:
    out = {k: v for k, v in fig.items() if k not in ("ratio", "phase_off")}
    out["ratio_re"], out["ratio_im"] = fig["ratio"].real, fig["ratio"].imag
    return out


def _close_point(core: LockinCore) -> LockinCore:
    """The current frequency's scope kept as a point (its sums; `_points` makes the figures)."""
    if core.cum.n < 2:
        return core
    return dataclasses.replace(core, points=core.points + (MappingProxyType({"_sums": core.cum}),))


def _points(state: EstimatorState, core: LockinCore, with_open: bool) -> list[dict[str, Any]]:
    """The closed points (and the open scope's, ``with_open``), as figures."""
    sums = [pt["_sums"] for pt in core.points]
    if with_open and core.cum.n >= 2:
        sums.append(core.cum)
    out = []
    for s in sums:
        fig = _figure(state, core, s)
        if fig is not None:
            out.append(_point(fig))
    return out


def _fit(points: list[dict[str, Any]], params: EstimatorParams) -> dict[str, Any] | None:
    freqs = {round(pt["frequency_hz"], 6) for pt in points}
    if len(freqs) < FIT_POINTS:
        return None
    try:
        fit = physics.fit_lifetime_from_lockin(
            [pt["frequency_hz"] for pt in points],
            [complex(pt["ratio_re"], pt["ratio_im"]) for pt in points],
            [pt["ratio_sigma"] for pt in points],
            probe_rate=params.probe_rate,
            tau_guess=params.tau,
        )
    except (ValueError, FloatingPointError, np.linalg.LinAlgError):
        return None
    if not (math.isfinite(fit.tau) and fit.tau > 0 and math.isfinite(fit.tau_sigma)):
        return None
    return dataclasses.asdict(fit)


def estimate(state: EstimatorState, core: LockinCore, scope: str, t: float, counts: Counts) -> Estimate:
    sums = core.win if scope == "window" else core.cum
    p = state.params
    wl = wavelength_of(state)
    flags = common_flags(state, t, counts, wl, uses_baseline=False)
    values: dict[str, Any] = {}
    tc, order = _filter(state.settings)
    extra: dict[str, Any] = {
        "n_readings": sums.n,
        "lockin_time_constant_s": tc,
        "lockin_filter_order": order,
    }
    if (p.pump_absorbance or 0.0) > THICK_ABSORBANCE:
        flags.add("thick_sample")
    if sums.n == 0 or (scope == "window" and counts.unsettled):
        flags.add("not_settled")
    if sums.overloads:
        flags.add("overload")
    fig = _figure(state, core, sums)
    if fig is not None:
        values = figures(p, fig["ln_ratio"], fig["ln_ratio_sigma"], wl)
        values = with_ln_ratio_systematic(values, fig["ln_ratio_sys"])
        extra.update(pump_induced(p, values, wl))
        extra.update({k: v for k, v in _point(fig).items() if k not in ("ln_ratio", "ln_ratio_sigma")})
        flags |= snr_flags(values, p, int(fig["n_eff"]))
        if fig["phase_off"]:
            flags.add("phase_mismatch")
    elif sums.n:
        flags.add("low_snr")
    if scope == "cumulative" and (core.points or sums.n):
        points = _points(state, core, with_open=True)
        extra["points"] = tuple(MappingProxyType(pt) for pt in points)
        fit = _fit(points, p)
        if fit is not None:
            # a frequency series: ln R is the fit's, in which tau and the pump rate are measured,
            # not assumed (no response-model systematic); the last step's own figures stay in extra
            values = figures(p, fit["ln_ratio_on"], fit["ln_ratio_on_sigma"], wl)
            values["tau_s"] = quantity(fit["tau"], fit["tau_sigma"])
            extra.update(pump_induced(p, values, wl))
            extra["fits"] = MappingProxyType({"lifetime": MappingProxyType(fit)})
            flags.discard("low_snr")
            flags |= snr_flags(values, p, sum(int(pt["n_eff"]) for pt in points))
    return Estimate(
        t=t,
        mode=state.mode,
        scope=scope,
        values=MappingProxyType(values),
        flags=frozenset(flags),
        n_samples=int(sums.n),
        extra=MappingProxyType(extra),
    )


MODE = Mode(
    name="lockin",
    new_core=lambda params, settings, clock: LockinCore(),
    ingest=_ingest,
    add=_add,
    reset_window=_reset_window,
    estimate=estimate,
    flush=lambda state: state,
    settle=_settle,
    pump_steady=lambda settings: False,
    words="lockin: modulated pump, lock-in detection",
    cli_words="lockin: pump square-wave modulated, probe read by a lock-in (a lock-in bench)",
    describe="lockin, pump modulated at {lockin_hz:g} Hz, lock-in detection",
    settings=("lockin_time_constant", "lockin_filter_order", *EMISSION_SETTINGS),
    polled=True,
    pump_on=_pump_on,
    channels=(LOCKIN_X, LOCKIN_Y, REFERENCE_HZ, OVERLOAD, PROBE),
)
