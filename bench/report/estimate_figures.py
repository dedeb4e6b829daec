"""The figures of the estimates: estimates over time with the simulator's truth, the lifetime
fit, the pump saturation curve and the gain spectrum. Each takes plain data and returns a
`matplotlib.figure.Figure`, or None when the run holds nothing to draw.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from matplotlib import rc_context
from matplotlib.figure import Figure
from scipy import constants

from bench import physics
from bench.physics import fitting
from bench.records import Estimate
from bench.report.figure_style import (
    BLACK,
    BLUE,
    GREY,
    ORANGE,
    RC,
    SERIES_STYLES,
    VERMILLION,
    new_figure,
    plain,
    plus_minus_label,
)


def _thin(items: list, limit: int) -> list:
    if len(items) <= limit:
        return items
    step = -(-len(items) // limit)
    kept = items[::step]
    if kept[-1] is not items[-1]:
        kept.append(items[-1])
    return kept


def truth_series(truth: Sequence[Mapping[str, Any]], sigma_a: float) -> dict[str, np.ndarray]:
    """The simulator's truth over time: beta and gain (dB), NaN where the pump was off.

    The gain is the medium's own single-pass transmission where the rows hold it, else (older
    runs) the net gain of the true ln R."""
    rows = [r for r in truth if isinstance(r.get("t"), (int, float))]
    t = np.array([float(r["t"]) for r in rows])
    pump = np.array([float(r.get("pump_w", 1.0)) for r in rows])
    on = pump > 0
    beta = np.array([float(r.get("beta", np.nan)) for r in rows])
    gain = np.full(t.size, np.nan)
    for i, r in enumerate(rows):
        try:
            if "ln_t_pumped" in r:  # the medium's own probe transmission (newer runs)
                gain[i] = float(physics.ln_gain_to_db(float(r["ln_t_pumped"])))
                continue
            g = physics.net_gain(float(r["ln_ratio"]), sigma_a, float(r["n_total"]), float(r["length"]))
            gain[i] = float(physics.gain_db(g))
        except (KeyError, TypeError, ValueError):
            pass
    return {"t": t, "beta": np.where(on, beta, np.nan), "gain_db": np.where(on, gain, np.nan)}


ESTIMATE_PANELS = (("beta", "excited fraction β", 1.0), ("gain_db", "single-pass net gain (dB)", 1.0))


#: Drawn instead when no estimate has beta or gain (a probe-wavelength sweep without a spectrum).
LN_RATIO_PANEL = ("ln_ratio", "ln R", 1.0)


def estimates_figure(
    series: Sequence[tuple[str, Sequence[Estimate]]],
    truth: Mapping[str, np.ndarray] | None,
    *,
    title: str,
    trips: Sequence[float] = (),
    limit: int = 3000,
) -> Figure | None:
    """Cumulative beta and gain with their ±2σ bands, window estimates as points, truth markers.

    The value axis spans the estimates and their bands; a truth sample far outside (the truth is
    sampled at instants, and may catch the pump's rise) is counted in the corner, not drawn.
    """

    def present(key: str) -> bool:
        return any(key in e.values for _, ests in series for e in ests)

    panels = [p for p in ESTIMATE_PANELS if present(p[0])] or (
        [LN_RATIO_PANEL] if present("ln_ratio") else []
    )
    if not panels:
        return None
    single = len(series) == 1
    with rc_context(RC):
        fig = new_figure(10, 2.2 + 2.4 * len(panels))
        axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
        for ax, (key, label, scale) in zip(axes, panels):
            spans: list[np.ndarray] = []
            for i, (name, ests) in enumerate(series):
                colour, ls, marker, hatch = SERIES_STYLES[i % len(SERIES_STYLES)]
                prefix = "" if single else f"{name}: "
                cum = _thin([e for e in ests if e.scope == "cumulative" and key in e.values], limit)
                win = _thin([e for e in ests if e.scope == "window" and key in e.values], limit)
                if cum:
                    t = np.array([e.t for e in cum])
                    v = np.array([e.values[key].value for e in cum]) * scale
                    s = np.array([e.values[key].sigma for e in cum]) * scale
                    ax.fill_between(
                        t,
                        v - 2 * s,
                        v + 2 * s,
                        facecolor=colour,
                        alpha=0.18,
                        hatch=hatch,
                        edgecolor=colour,
                        lw=0,
                        label=f"{prefix}cumulative ±2σ (combined)",
                    )
                    ax.plot(t, v, color=colour, ls=ls, lw=1.6, label=f"{prefix}cumulative estimate")
                    spans += [v - 2 * s, v + 2 * s]
                if win:
                    t = np.array([e.t for e in win])
                    v = np.array([e.values[key].value for e in win]) * scale
                    s = np.array([e.values[key].sigma_noise for e in win]) * scale
                    ax.errorbar(
                        t,
                        v,
                        yerr=2 * s,
                        fmt=marker,
                        ms=3.5,
                        color=colour,
                        mfc="white",
                        lw=0.8,
                        capsize=0,
                        label=f"{prefix}window estimates (±2σ noise)",
                    )
                    spans += [v - 2 * s, v + 2 * s]
            vals = np.concatenate(spans) if spans else np.array([])
            vals = vals[np.isfinite(vals)]
            lo = hi = None
            if vals.size:
                lo, hi = float(vals.min()), float(vals.max())
                pad = 0.15 * (hi - lo) if hi > lo else 0.05 * max(abs(hi), 1e-6)
                lo, hi = lo - pad, hi + pad
                ax.set_ylim(lo, hi)
            if truth is not None and key in truth and np.isfinite(truth[key]).any():
                tv = truth[key] * scale
                inside = np.isfinite(tv) if lo is None else np.isfinite(tv) & (tv >= lo) & (tv <= hi)
                ax.plot(
                    truth["t"][inside],
                    tv[inside],
                    "x",
                    color=BLACK,
                    ms=6,
                    mew=1.4,
                    label="simulator truth (instantaneous, pump on)",
                )
                outside = int((np.isfinite(tv) & ~inside).sum())
                if outside:
                    ax.text(
                        0.99,
                        0.03,
                        f"{outside} truth sample{'s' if outside > 1 else ''} outside this range",
                        transform=ax.transAxes,
                        ha="right",
                        va="bottom",
                        fontsize=8.5,
                    )
            for k, t in enumerate(trips):
                ax.axvline(
                    t, color=VERMILLION, ls="--", lw=1.0, label="guard trip (pump off)" if k == 0 else None
                )
            ax.set_ylabel(label)
        axes[-1].set_xlabel("run time t (s)")
        handles, labels = axes[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="outside lower center", ncols=3 if single else 2, frameon=False)
        fig.suptitle(f"Estimates over time, run {plain(title)}")
    return fig


def decay_figure(estimate: Estimate | None, *, title: str) -> Figure | None:
    """The lifetime fit: binned ln R(t) after the pump switches off, the fitted exponential,
    and the residuals in units of their standard uncertainty."""
    if estimate is None:
        return None
    curve = estimate.extra.get("curve") if isinstance(estimate.extra, Mapping) else None
    fit = estimate.extra.get("fit") if isinstance(estimate.extra, Mapping) else None
    if not isinstance(curve, Mapping) or not curve.get("t_s"):
        return None
    t = np.asarray(curve["t_s"], float) * 1e3
    y = np.asarray(curve["ln_ratio"], float)
    s = np.asarray(curve["sigma"], float)
    model = np.asarray(curve["fit"], float)
    with np.errstate(invalid="ignore", divide="ignore"):
        resid = np.where(s > 0, (y - model) / s, np.nan)
    with rc_context(RC):
        fig = new_figure(9, 6.5)
        top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3, 1.3])
        top.errorbar(
            t,
            y,
            yerr=s,
            fmt="o",
            ms=3.5,
            color=BLUE,
            mfc="white",
            lw=0.8,
            capsize=0,
            label="binned mean of the decays (±1σ)",
        )
        label = "fit: ln R(t) = ln R(0) exp(−t / τ_d)"
        if isinstance(fit, Mapping) and "tau" in fit:
            label += (
                f"\nln R(0) = {plus_minus_label(fit['amplitude'], fit['amplitude_sigma'])}, "
                f"τ_d = {plus_minus_label(fit['tau'] * 1e3, fit['tau_sigma'] * 1e3)} ms, "
                f"χ²/dof = {fit['chi2_reduced']:.2f} ({fit.get('dof', '?')} dof)"
            )
        top.plot(t, model, color=VERMILLION, ls="--", lw=1.8, label=label)
        top.set_ylabel("ln R(t)")
        tau = estimate.values.get("tau_s")
        n = estimate.extra.get("n_decays", "?")
        sub = f"{n} decays averaged"
        if tau is not None:
            sub += f"; lifetime after the probe correction τ = {plus_minus_label(tau.value * 1e3, tau.sigma * 1e3)} ms"
        top.set_title(sub)
        bottom.axhline(0.0, color=BLACK, lw=0.8)
        for k in (-2, 2):
            bottom.axhline(k, color=GREY, lw=0.8, ls=":")
        bottom.plot(t, resid, "o", ms=3.5, color=BLUE, mfc="white")
        bottom.set_ylabel("residual / σ")
        bottom.set_xlabel("time after the pump switched off (ms)")
        fig.legend(*top.get_legend_handles_labels(), loc="outside lower center", ncols=2, frameon=False)
        fig.suptitle(f"Lifetime fit, run {plain(title)}")
    return fig


def _truth_per_power(truth: Sequence[Mapping[str, Any]]) -> list[tuple[float, float]]:
    groups: dict[float, list[float]] = {}
    for r in truth:
        p, b = r.get("pump_w"), r.get("beta")
        if isinstance(p, (int, float)) and isinstance(b, (int, float)) and p > 0:
            groups.setdefault(round(float(p), 9), []).append(float(b))
    return sorted((p, float(np.mean(v))) for p, v in groups.items())


def saturation_figure(
    estimate: Estimate | None, truth: Sequence[Mapping[str, Any]] | None, *, title: str
) -> Figure | None:
    """beta versus pump power at each sweep step, with the fitted saturation curve."""
    if estimate is None or not isinstance(estimate.extra, Mapping):
        return None
    points = [
        p
        for p in estimate.extra.get("points") or ()
        if isinstance(p, Mapping) and isinstance(p.get("pump_power_w"), (int, float)) and "beta" in p
    ]
    fits = estimate.extra.get("fits") if isinstance(estimate.extra.get("fits"), Mapping) else {}
    step = estimate.extra.get("step") if isinstance(estimate.extra.get("step"), Mapping) else {}
    if points:
        wl0 = points[-1].get("probe_wavelength_m")
        points = [p for p in points if p.get("probe_wavelength_m") == wl0]
    open_power = step.get("pump_power_w")
    open_beta = estimate.values.get("beta")
    has_open = (
        isinstance(open_power, (int, float))
        and open_beta is not None
        and all(p["pump_power_w"] != open_power for p in points)
    )
    if not points and not has_open:
        return None
    with rc_context(RC):
        fig = new_figure(9, 5.5)
        ax = fig.subplots()
        if points:
            x = np.array([p["pump_power_w"] for p in points])
            y = np.array([p["beta"] for p in points])
            s = np.array([p.get("beta_sigma_noise", 0.0) for p in points])
            ax.errorbar(
                x,
                y,
                yerr=s,
                fmt="o",
                ms=6,
                color=BLUE,
                capsize=3,
                lw=1.0,
                label="closed steps (±1σ noise: the fit's weights)",
            )
        if has_open:
            ax.errorbar(
                [open_power],
                [open_beta.value],
                yerr=[open_beta.sigma_noise],
                fmt="s",
                ms=7,
                mfc="white",
                color=ORANGE,
                capsize=3,
                label="last step, still open (not in the fit)",
            )
        sat = fits.get("saturation")
        if isinstance(sat, Mapping) and isinstance(sat.get("curve"), Mapping):
            cx = np.asarray(sat["curve"]["pump_power_w"], float)
            cy = np.asarray(sat["curve"]["beta"], float)
            bm = plus_minus_label(
                sat["beta_max"], math.hypot(sat["beta_max_sigma_noise"], sat["beta_max_sigma_systematic"])
            )
            ps = plus_minus_label(
                sat["p_sat_w"], math.hypot(sat["p_sat_w_sigma_noise"], sat["p_sat_w_sigma_systematic"])
            )
            ax.plot(
                cx,
                cy,
                color=VERMILLION,
                ls="--",
                lw=1.8,
                label=f"fit ({sat.get('model', '?')} sample): β_max = {bm}, P_sat = {ps} W, "
                f"χ²/dof = {sat.get('chi2_reduced', float('nan')):.2f}",
            )
        else:
            why = fits.get("saturation_error") or "needs closed steps at 3 or more pump powers"
            ax.plot([], [], " ", label=f"no saturation fit: {plain(why)}")
        if truth:
            tp = _truth_per_power(truth)
            if tp:
                ax.plot(
                    [p for p, _ in tp],
                    [b for _, b in tp],
                    "x",
                    ms=8,
                    mew=1.6,
                    color=BLACK,
                    label="simulator truth (per pump power)",
                )
        rel = None
        if open_beta is not None and open_beta.value:
            rel = open_beta.sigma_systematic / abs(open_beta.value)
        ax.set_xlabel("pump power P (W, from the current calibration)")
        ax.set_ylabel("excited fraction β")
        ax.set_xlim(left=0)
        ax.set_ylim(bottom=0)
        fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=2, frameon=False)
        sub = "" if rel is None else f" (every β also carries a common {rel * 100:.2g} % scale uncertainty)"
        ax.set_title(f"Pump saturation{sub}")
        fig.suptitle(f"Pump-power sweep, run {plain(title)}")
    return fig


def spectrum_curve(spec: Mapping[str, Any], wavelengths: np.ndarray) -> np.ndarray:
    """The fitted Voigt line of a sweep's ``fits["spectrum"]`` at ``wavelengths`` (m), per metre.

    The fit stores full widths; the line's parameters are ``sigma = FWHM_G / (2 sqrt(2 ln 2))``
    (Gaussian) and ``gamma = FWHM_L / 2`` (Lorentzian half width), in optical frequency.
    """
    lam = np.asarray(wavelengths, dtype=np.float64)
    if lam.size == 0 or not np.all(lam > 0):
        raise ValueError("wavelengths: expected positive wavelengths in m")
    sg = float(spec["gaussian_fwhm_hz"]) / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gl = float(spec["lorentzian_fwhm_hz"]) / 2.0
    return fitting.voigt_line(
        constants.c / lam, float(spec["peak_gain_change_per_m"]), float(spec["centre_hz"]), sg, gl
    )


def spectrum_figure(estimate: Estimate | None, *, title: str) -> Figure | None:
    """The gain change at each probe wavelength, with the fitted Voigt line."""
    if estimate is None or not isinstance(estimate.extra, Mapping):
        return None
    points = [
        p
        for p in estimate.extra.get("points") or ()
        if isinstance(p, Mapping)
        and isinstance(p.get("probe_wavelength_m"), (int, float))
        and "gain_change_per_m" in p
    ]
    if len({p["probe_wavelength_m"] for p in points}) < 2:
        return None
    fits = estimate.extra.get("fits") if isinstance(estimate.extra.get("fits"), Mapping) else {}
    lam = np.array([p["probe_wavelength_m"] for p in points])
    y = np.array([p["gain_change_per_m"] for p in points]) / 100.0
    s = np.array([p.get("gain_change_per_m_sigma", 0.0) for p in points]) / 100.0
    with rc_context(RC):
        fig = new_figure(9, 5.5)
        ax = fig.subplots()
        ax.errorbar(
            lam * 1e9,
            y,
            yerr=s,
            fmt="o",
            ms=6,
            color=BLUE,
            capsize=3,
            lw=1.0,
            label="measured steps (±1σ noise)",
        )
        spec = fits.get("spectrum")
        if isinstance(spec, Mapping):
            span = lam.max() - lam.min()
            grid = np.linspace(lam.min() - 0.05 * span, lam.max() + 0.05 * span, 400)
            curve = spectrum_curve(spec, grid)
            centre = plus_minus_label(spec["centre_m"] * 1e9, spec["centre_m_sigma"] * 1e9)
            ax.plot(
                grid * 1e9,
                curve / 100.0,
                color=VERMILLION,
                ls="--",
                lw=1.8,
                label=f"Voigt fit: centre {centre} nm, FWHM {spec['voigt_fwhm_hz'] / 1e12:.3g} THz, "
                f"χ²/dof = {spec.get('chi2_reduced', float('nan')):.2f}",
            )
            ax.axvline(spec["centre_m"] * 1e9, color=GREY, ls=":", lw=1.0)
        else:
            why = fits.get("spectrum_error") or "needs 5 or more probe wavelengths"
            ax.plot([], [], " ", label=f"no line fit: {plain(why)}")
        mc = fits.get("mccumber")
        if isinstance(mc, Mapping) and "consistent" in mc:
            verdict = "consistent" if mc["consistent"] else "NOT consistent"
            ax.plot([], [], " ", label=f"McCumber check against the configured spectrum: {verdict}")
        ax.axhline(0.0, color=BLACK, lw=0.6)
        ax.set_xlabel("probe wavelength λ (nm)")
        ax.set_ylabel("pump-induced gain change ln R / L (cm⁻¹)")
        fig.legend(*ax.get_legend_handles_labels(), loc="outside lower center", ncols=1, frameon=False)
        fig.suptitle(f"Gain spectrum, run {plain(title)}")
    return fig
