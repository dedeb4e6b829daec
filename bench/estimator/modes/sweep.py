"""Sweep mode: pump-power or probe-wavelength steps, each measured as in a step mode.

Steps are announced with `bench.estimator.stream.with_setting` (or by a pump block's
``pump_setpoint`` / a wavelength block's ``probe_wavelength`` channel). Each step is measured as
in the mode named by the setting ``method``: ``watch`` (the default) or ``chopped`` (what
``gainbench record`` and the dashboard use: every step's ln R is then referred to the pump-off
half-periods around it, so a slow drift of the probe/reference ratio cancels). Any registered
mode with a ``step_figure`` can be a step mode; the sweep takes that mode's settle times,
ingest, add and estimate for its step.

The step points are fitted with the pump saturation form (`bench.physics.fitting.fit_saturation`;
over an optically thick sample, `bench.physics.fitting.thick_sample_fraction`, with the
configured pump absorbance whose uncertainty enters the fit parameters' systematic parts) and,
over wavelength, the pump-induced gain change ``ln R / L`` with a Voigt line in optical
frequency (`bench.physics.fitting.fit_voigt`) plus a McCumber check when a cross-section
spectrum and the zero-line energy are configured. The points' ``beta`` is absolute (see
`bench.estimator.figures`); the fit takes the probe-held part ``beta_off`` off first and undoes
the probe's stimulated rate ``W_s``, which stretches the fitted saturation power by ``1 + tau
W_s`` (the same rate as the decay mode's correction; `_saturation_fit`). Extras: ``points``
(each with its span ``t_start``/``t_end`` on the run clock), ``fits`` (with the fitted curve). A
sweep's last step is closed by `bench.estimator.stream.report` (the consumer calls it when the
stream ends). Setting changes must arrive at the same sample positions (between the same two
samples) for a replay to give the same points, as they do on replay.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
from scipy import constants

from bench import physics
from bench.errors import GainbenchError
from bench.estimator.figures import figures, probe_terms, pump_induced, quantity, wavelength_of
from bench.estimator.mode import Mode, mode_of
from bench.estimator.modes import chopped
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Clock, Counts, EstimatorState, Frame
from bench.physics import fitting
from bench.records import Estimate

__all__ = ["MODE", "SweepCore", "step_mode"]

_EMPTY: Mapping[str, Any] = MappingProxyType({})

#: The step mode of a sweep without a ``method`` setting.
DEFAULT_METHOD = "watch"


@dataclass(frozen=True)
class SweepCore:
    method: str  # the step mode's name
    inner: Any  # the step mode's core for the current step
    points: tuple[Mapping[str, Any], ...] = ()
    fits: Mapping[str, Any] = field(default_factory=lambda: _EMPTY)


def step_mode(settings_or_method: Mapping[str, Any] | str) -> Mode:
    """The `Mode` each step of a sweep is measured as (its ``method``)."""
    method = (
        settings_or_method
        if isinstance(settings_or_method, str)
        else settings_or_method.get("method", DEFAULT_METHOD)
    )
    return mode_of(method)


def step_modes() -> tuple[str, ...]:
    """The names of the modes a sweep step can be measured as (those with a ``step_figure``)."""
    from bench.estimator.mode import MODES

    return tuple(name for name, m in MODES.items() if m.step_figure is not None)


def close_step(state: EstimatorState) -> EstimatorState:
    """Close the current step into a point (and refit), if it has a figure."""
    core = state.core
    if not isinstance(core, SweepCore):
        return state
    point = _make_point(state, core)
    if point is None:
        return state
    points = core.points + (MappingProxyType(point),)
    core = dataclasses.replace(core, points=points, fits=MappingProxyType(_sweep_fits(state, points)))
    return dataclasses.replace(state, core=core)


def _make_point(state: EstimatorState, core: SweepCore) -> dict[str, Any] | None:
    fig = step_mode(core.method).step_figure(state, core.inner)
    if fig is None:
        return None
    lnr, sn, k, n = fig
    wl = wavelength_of(state)
    point: dict[str, Any] = {
        "pump_power_w": state.settings.get("pump_power"),
        "pump_current_a": state.settings.get("pump_current"),
        "probe_wavelength_m": wl,
        "ln_ratio": lnr,
        "ln_ratio_sigma": sn,
        "n_items": k,
        "n_samples": int(n),
        "gain_change_per_m": lnr / state.params.length,
        "gain_change_per_m_sigma": sn / state.params.length,
    }
    vals = figures(state.params, lnr, sn, wl)
    if "beta" in vals:
        point["beta"] = vals["beta"].value
        point["beta_sigma_noise"] = vals["beta"].sigma_noise
        point["beta_sigma"] = vals["beta"].sigma
        point.update(pump_induced(state.params, vals, wl))
    # the step's span on the run clock: from its settle time after the setting to its last sample
    clock = state.clock
    if clock is not None:
        step_n = int(math.ceil(state.params.step_settle_time / clock.dt - 1e-9))
        first = max(state.pump.last_step, 0) + step_n
        point["t_start"] = clock.time(min(first, clock.next_index - 1))
        point["t_end"] = clock.time(clock.next_index - 1)
    return point


def _saturation_fit(
    x: np.ndarray, y: np.ndarray, s: np.ndarray, absorbance: float | None, b_off: float
) -> tuple[fitting.FitResult, float | None]:
    """Fit the pump-induced change ``y`` (beta less the probe-held ``b_off``) with the saturation
    form; (fit, the absorbance used).

    With the probe on, the steady state is ``beta = (beta_max s + b_off) / (1 + s)``, so
    ``beta - b_off`` follows the saturation form with maximum ``beta_max - b_off`` and the
    saturation power stretched by ``1 + tau W_s`` (the caller undoes both). Over a thick sample
    the pump's unbleached absorption coefficient is then ``sigma_ap N (1 - b_off / beta_max)``
    (the probe-held ions do not absorb the pump): one refit with that absorbance, taking
    ``beta_max`` from the first fit (rate equations: Svelto, *Principles of Lasers*, ch. 7).
    """
    fit = fitting.fit_saturation(x, y, s, absorbance=absorbance)
    if absorbance is None or b_off <= 0.0:
        return fit, absorbance
    bm = fit.value("beta_max") + b_off
    if not bm > b_off:
        return fit, absorbance
    a_eff = absorbance * (1.0 - b_off / bm)
    return fitting.fit_saturation(x, y, s, absorbance=a_eff), a_eff


def _sweep_fits(state: EstimatorState, points: tuple[Mapping[str, Any], ...]) -> dict[str, Any]:
    p = state.params
    out: dict[str, Any] = {}
    # pump saturation: points at one wavelength with beta and a pump power
    pw = [pt for pt in points if pt.get("pump_power_w") is not None and "beta" in pt]
    if pw:
        wl0 = pw[-1]["probe_wavelength_m"]
        pw = [pt for pt in pw if pt["probe_wavelength_m"] == wl0]
    if len({pt["pump_power_w"] for pt in pw if pt["pump_power_w"] > 0}) >= 3:
        x = np.array([pt["pump_power_w"] for pt in pw])
        _, w_probe, b_off = probe_terms(p, wl0)
        # the pump-induced change (the points' beta less the probe-held part)
        y = np.array([pt["beta"] for pt in pw]) - b_off
        s = np.array([pt["beta_sigma_noise"] for pt in pw])
        a = p.pump_absorbance
        try:
            fit, a_eff = _saturation_fit(x, y, s, a, b_off)
        except ValueError as exc:
            out["saturation_error"] = str(exc)
        else:
            xs = p.cross_sections_at(wl0)
            se, sa = xs if xs is not None else (p.sigma_e, p.sigma_a)
            u_sum = p.u_cross_sections * math.hypot(se, sa) / (se + sa)
            rel_sys = math.sqrt(u_sum**2 + (p.u_length / p.length) ** 2 + p.u_n_total**2)
            # the probe's own stimulated rate adds to 1/tau: the fitted saturation power is
            # p_sat (1 + tau W_s); its maximum is beta_max less the probe-held part
            stretch = 1.0 + p.tau * w_probe
            bm, ps = fit.value("beta_max") + b_off, fit.value("p_sat") / stretch
            sys_bm, sys_ps = (bm - b_off) * rel_sys, ps * (p.tau * w_probe / stretch) * p.u_tau
            if a is not None:
                # the configured absorbance is uncertain too: its effect by refitting at A +/- u_A
                ua = a * p.u_pump_absorbance
                try:
                    hi, _ = _saturation_fit(x, y, s, a + ua, b_off)
                    lo, _ = _saturation_fit(x, y, s, max(a - ua, 1e-6 * a), b_off)
                except ValueError:
                    pass
                else:
                    d_bm = 0.5 * (hi.value("beta_max") - lo.value("beta_max"))
                    d_ps = 0.5 * (hi.value("p_sat") - lo.value("p_sat")) / stretch
                    sys_bm, sys_ps = math.hypot(sys_bm, d_bm), math.hypot(sys_ps, d_ps)
            grid = np.linspace(0.0, float(np.max(x)) * 1.1, 50)
            curve = b_off + (
                fitting.thick_sample_fraction(grid, bm - b_off, ps * stretch, a_eff)
                if a is not None
                else physics.beta_of_pump(grid, bm - b_off, ps * stretch)
            )
            out["saturation"] = {
                "model": "thick" if a is not None else "thin",
                "pump_absorbance": a,
                "beta_max": bm,
                "beta_max_sigma_noise": fit.sigma("beta_max"),
                "beta_max_sigma_systematic": sys_bm,
                "p_sat_w": ps,
                "p_sat_w_sigma_noise": fit.sigma("p_sat") / stretch,
                "p_sat_w_sigma_systematic": sys_ps,
                "probe_rate_per_s": w_probe,
                "beta_probe_held": b_off,
                "chi2_reduced": fit.chi2_reduced,
                "dof": fit.dof,
                "curve": {"pump_power_w": [float(v) for v in grid], "beta": [float(v) for v in curve]},
            }
    # gain spectrum over probe wavelength
    wv = [pt for pt in points if pt.get("probe_wavelength_m") is not None]
    if wv:
        pw0 = wv[-1]["pump_power_w"]
        wv = [pt for pt in wv if pt["pump_power_w"] == pw0]
    if len({pt["probe_wavelength_m"] for pt in wv}) >= 5:
        lam = np.array([pt["probe_wavelength_m"] for pt in wv])
        nu = constants.c / lam
        y = np.array([pt["gain_change_per_m"] for pt in wv])
        s = np.array([pt["gain_change_per_m_sigma"] for pt in wv])
        try:
            fit = fitting.fit_voigt(nu, y, s)
        except ValueError as exc:
            out["spectrum_error"] = str(exc)
        else:
            nu0 = fit.value("centre")
            sg, gl = fit.value("sigma_gauss"), fit.value("gamma_lorentz")
            out["spectrum"] = {
                "peak_gain_change_per_m": fit.value("height"),
                "peak_gain_change_per_m_sigma": fit.sigma("height"),
                "centre_hz": nu0,
                "centre_hz_sigma": fit.sigma("centre"),
                "centre_m": constants.c / nu0,
                "centre_m_sigma": constants.c / nu0**2 * fit.sigma("centre"),
                "gaussian_fwhm_hz": 2.0 * math.sqrt(2.0 * math.log(2.0)) * sg,
                "gaussian_fwhm_hz_sigma": 2.0 * math.sqrt(2.0 * math.log(2.0)) * fit.sigma("sigma_gauss"),
                "lorentzian_fwhm_hz": 2.0 * gl,
                "lorentzian_fwhm_hz_sigma": 2.0 * fit.sigma("gamma_lorentz"),
                "voigt_fwhm_hz": fitting.voigt_fwhm(sg, gl),
                "chi2_reduced": fit.chi2_reduced,
                "dof": fit.dof,
            }
        if p.spectrum is not None and p.zero_line_energy is not None:
            try:
                xs = [p.spectrum.at(v) for v in lam]
                check = fitting.mccumber_consistency(
                    lam,
                    y * p.length,
                    s * p.length,
                    [x[0] for x in xs],
                    [x[1] for x in xs],
                    p.zero_line_energy,
                    p.temperature,
                )
            except (ValueError, GainbenchError) as exc:  # a wavelength outside the spectrum is reported
                out["mccumber_error"] = str(exc)
            else:
                out["mccumber"] = check.as_dict()
    return out


def estimate(state: EstimatorState, core: SweepCore, scope: str, t: float, counts: Counts) -> Estimate:
    est = step_mode(core.method).estimate(state, core.inner, scope, t, counts)
    if scope == "window":
        return est
    values = dict(est.values)
    fits = core.fits
    sat = fits.get("saturation")
    if sat is not None:
        values["beta_max"] = quantity(
            sat["beta_max"], sat["beta_max_sigma_noise"], sat["beta_max_sigma_systematic"]
        )
        values["p_sat_w"] = quantity(
            sat["p_sat_w"], sat["p_sat_w_sigma_noise"], sat["p_sat_w_sigma_systematic"]
        )
    spec = fits.get("spectrum")
    if spec is not None:
        values["line_centre_m"] = quantity(spec["centre_m"], spec["centre_m_sigma"])
        values["gaussian_fwhm_hz"] = quantity(spec["gaussian_fwhm_hz"], spec["gaussian_fwhm_hz_sigma"])
        values["lorentzian_fwhm_hz"] = quantity(spec["lorentzian_fwhm_hz"], spec["lorentzian_fwhm_hz_sigma"])
    extra = dict(est.extra)
    extra["step"] = {
        "pump_power_w": state.settings.get("pump_power"),
        "probe_wavelength_m": state.settings.get("probe_wavelength"),
    }
    extra["points"] = [dict(pt) for pt in core.points]
    extra["fits"] = _plain(fits)
    return dataclasses.replace(est, values=MappingProxyType(values), extra=MappingProxyType(extra))


def _plain(obj):
    """A JSON-friendly copy (mappings to dicts, tuples to lists)."""
    if isinstance(obj, Mapping):
        return {k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    return obj


def new_core(params: EstimatorParams, settings: Mapping[str, Any], clock: Clock | None) -> SweepCore:
    method = settings.get("method", DEFAULT_METHOD)
    return SweepCore(method=method, inner=mode_of(method).new_core(params, settings, clock))


def restart(state: EstimatorState) -> SweepCore:
    """A fresh step (the points and fits stay)."""
    core = state.core
    if not isinstance(core, SweepCore):
        return new_core(state.params, state.settings, state.clock)
    inner = mode_of(core.method).new_core(state.params, state.settings, state.clock)
    return dataclasses.replace(core, inner=inner)


def ingest(state: EstimatorState, core: SweepCore, f: Frame, clock: Clock) -> tuple[SweepCore, list]:
    inner, items = step_mode(core.method).ingest(state, core.inner, f, clock)
    return dataclasses.replace(core, inner=inner), items


def add(core: SweepCore, item) -> SweepCore:
    return dataclasses.replace(core, inner=step_mode(core.method).add(core.inner, item))


def reset_window(core: SweepCore) -> SweepCore:
    return dataclasses.replace(core, inner=step_mode(core.method).reset_window(core.inner))


def flush(state: EstimatorState) -> EstimatorState:
    """The open step among the points and fits, and its open part counted (for `report`)."""
    st = close_step(state)
    core = st.core
    inner = step_mode(core.method).flush(dataclasses.replace(st, core=core.inner)).core
    return dataclasses.replace(st, core=dataclasses.replace(core, inner=inner))


def check_method(value: Any) -> None:
    """ValueError unless ``value`` names a step mode (`step_modes`)."""
    names = step_modes()
    if value not in names:
        listed = " or ".join(repr(n) for n in names)
        raise ValueError(f"settings: method must be {listed}, got {value!r}")


MODE = Mode(
    name="sweep",
    new_core=new_core,
    ingest=ingest,
    add=add,
    reset_window=reset_window,
    estimate=estimate,
    flush=flush,
    settle=lambda params, settings: step_mode(settings).settle(params, settings),
    pump_steady=lambda settings: step_mode(settings).pump_steady(settings),
    words="sweep: pump current in steps (saturation)",
    cli_words="sweep: pump current steps, each chopped",
    describe="sweep, {steps} steps of {dwell:g} s, each chopped at {chop_ms:g} ms",
    # the sweeps gainbench runs chop every step (`gainbench record`, the dashboard)
    timing=chopped.TIMING,
    period="chop",
    steps_pump=True,
    settings=("method",),
    run_settings={"method": "chopped"},  # each step chopped: its ln R is immune to slow drift
    restart=restart,
    close_step=close_step,
)
