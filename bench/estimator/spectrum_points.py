"""Cross-sections at each wavelength of a spectrum run, from its steps (`bench.estimator.modes.spectrum`).

Every step gives the pump-off level ``S_off`` (probe over reference, dark subtracted) and the
pump-induced ``ln R`` (chopped: referred to the pump-off half-periods around each pump-on one).
Steps at the bench file's probe wavelength (the *anchors*, where the bench file gives sigma_a
and sigma_e) calibrate the scan:

* absorption (Beer-Lambert, `bench.physics.gain_spectrum.absorption_from_transmission`): the
  anchor's unpumped transmission, from the bench file's sigma_a and the Fresnel loss of two
  uncoated faces (`bench.physics.fresnel_reflectance` of ``sample.refractive_index``), gives the
  probe/reference ratio with the sample out; each step's transmission is its ``S_off`` over
  that, Fresnel-corrected. Anchors at the start and the end of the scan are interpolated
  linearly in time, so a linear drift of the probe/reference ratio cancels.
* excited fraction: the anchors' ``ln R / ((sigma_e + sigma_a) N L)`` (the pump is the same at
  every step: beta does not depend on the probe wavelength), plus what the probe alone holds.
* emission: ``sigma_e = ln R / (beta N L) - sigma_a`` (`emission_from_ln_ratio`).

The probe's own excitation (``beta_off``, `bench.physics.probe_held_fraction`, at each step's
own cross-sections, two fixed-point passes) is taken off both. The anchors' own entries repeat
the bench file's values (no noise); they are marked ``anchor``.

Uncertainties: noise from the steps' scatter (the off levels' standard error, the chopped ln R
noise), the anchors' noise shared by every step; systematic from the bench file's
cross-section, density and length uncertainties. sigma_e is sigma_sum less sigma_a, so their
errors are anticorrelated (covariance ``-u(sigma_a)^2``), which the McCumber check uses.

References
----------
.. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 2 and 7.
.. [2] D. E. McCumber, Phys. Rev. 134, A299 (1964).
.. [3] S. A. Payne et al., IEEE J. Quantum Electron. 28, 2619 (1992).
.. [4] JCGM 100:2008 (GUM), sec. 5 (propagation of uncertainty).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from bench import physics
from bench.estimator.params import EstimatorParams
from bench.physics import gain_spectrum

#: Excited fractions of the gain cross-section family (besides the measured one).
FAMILY_BETAS = (0.0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.8, 1.0)


def is_anchor(params: EstimatorParams, wavelength: float | None) -> bool:
    lam0 = params.probe_wavelength
    return wavelength is not None and abs(wavelength - lam0) <= 1e-6 * lam0


def _t(pt: Mapping[str, Any]) -> float:
    a, b = pt.get("t_start"), pt.get("t_end")
    return 0.5 * (a + b) if a is not None and b is not None else 0.0


def _interp(anchors: list[Mapping[str, Any]], t: float, key: str, sig: str) -> tuple[float, float]:
    """(value, variance) of ``key`` at time ``t``, linear between the first and the last anchor."""
    a, b = anchors[0], anchors[-1]
    ta, tb = _t(a), _t(b)
    if b is a or tb <= ta:
        return float(a[key]), float(a[sig]) ** 2
    w = min(max((t - ta) / (tb - ta), 0.0), 1.0)
    return (1 - w) * a[key] + w * b[key], (1 - w) ** 2 * a[sig] ** 2 + w**2 * b[sig] ** 2


def _flux(params: EstimatorParams, wavelength: float) -> float:
    if params.probe_kind != "cw" or not params.probe_peak > 0:
        return 0.0
    return float(physics.photon_flux(params.probe_mean, wavelength))


def _held(params: EstimatorParams, wavelength: float, sa: float, se: float) -> float:
    flux = _flux(params, wavelength)
    if flux == 0.0:
        return 0.0
    return float(physics.probe_held_fraction(flux, max(se, 0.0), max(sa, 0.0), params.tau))


#: Slices of the sample for the pump's absorption along it, and the grid of front-face pump
#: rates (1/s) searched for the one that gives the anchors' excited fraction.
SLICES = 48
_RATE_GRID = np.logspace(-2.0, 8.0, 501)


def _mean_beta(w0: np.ndarray, f: float, absorbance: float, s_a: float, s: float, k: float) -> np.ndarray:
    """Length-averaged steady excited fraction for front-face pump rates ``w0`` (array).

    Slice by slice (`SLICES`), ``beta = (f W + S_a) / (W + S + 1/tau)`` and the pump's flux falls
    by ``exp(-(A / n)(1 - beta / f))`` (Beer-Lambert with the absorption the excited ions no longer
    give and the emission they add: ``sigma_ap N1 - sigma_ep N2 = sigma_ap N (1 - beta / f)``),
    evaluated at the slice's middle (one midpoint step). Svelto, ch. 2 and 7.
    """
    flux = np.ones_like(w0)
    total = np.zeros_like(w0)
    a = absorbance / SLICES
    for _ in range(SLICES):
        w = w0 * flux
        b = (f * w + s_a) / (w + s + k)
        mid = flux * np.exp(-0.5 * a * (1.0 - b / f))
        w = w0 * mid
        b = (f * w + s_a) / (w + s + k)
        total += b
        flux = flux * np.exp(-a * (1.0 - b / f))
    return total / SLICES


def pumped_fraction(
    params: EstimatorParams,
    beta0: float,
    lam0: float,
    xs0: tuple[float, float],
    lam: float,
    xs: tuple[float, float],
) -> float:
    """The pumped excited fraction at probe wavelength ``lam`` given ``beta0`` at ``lam0``.

    The probe's own rates shift the pumped steady state: with the pump's up and total rates
    ``f W`` and ``W`` (``f = sigma_ap / (sigma_ap + sigma_ep)``) and the probe's ``S_a = sigma_a
    Phi`` and ``S = (sigma_a + sigma_e) Phi``, ``beta = (f W + S_a) / (W + S + 1/tau)`` (two-level
    rate equations, Svelto ch. 7). The pump rate falls along the sample (`_mean_beta`, with the
    configured unbleached pump absorbance; uniform without one); the front-face rate that gives
    ``beta0`` at ``lam0`` then gives beta at ``lam`` (a correction of some 1e-4 of beta here).
    """
    f = params.pump_fraction_max
    phi0, phi = _flux(params, lam0), _flux(params, lam)
    if f is None or (phi0 == 0.0 and phi == 0.0) or not f - beta0 > 0:
        return beta0
    sa0, se0 = xs0
    sa, se = max(xs[0], 0.0), max(xs[1], 0.0)
    s_a0, s0 = sa0 * phi0, (sa0 + se0) * phi0
    s_a, s = sa * phi, (sa + se) * phi
    k = 1.0 / params.tau
    absorbance = params.pump_absorbance or 0.0
    betas = _mean_beta(_RATE_GRID, f, absorbance, s_a0, s0, k)
    if not betas[0] < beta0 < betas[-1]:
        return beta0
    log_w = float(np.interp(beta0, betas, np.log(_RATE_GRID)))
    # refine: one secant step on the exact profile around the interpolated rate
    w = np.array([math.exp(log_w) * 0.999, math.exp(log_w) * 1.001])
    bb = _mean_beta(w, f, absorbance, s_a0, s0, k)
    if bb[1] != bb[0]:
        w_star = w[0] + (beta0 - bb[0]) * (w[1] - w[0]) / (bb[1] - bb[0])
    else:
        w_star = math.exp(log_w)
    b_ref = float(_mean_beta(np.array([w_star]), f, absorbance, s_a0, s0, k)[0])
    b_lam = float(_mean_beta(np.array([w_star]), f, absorbance, s_a, s, k)[0])
    return beta0 + (b_lam - b_ref)  # the shift at the same pump, on the measured beta0


def _q(value: float, noise: float, sys: float) -> dict[str, float]:
    return {"value": value, "sigma": math.hypot(noise, sys), "sigma_noise": noise, "sigma_systematic": sys}


def spectrum_entries(params: EstimatorParams, points: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """``{"entries": [...], "family": {...}, "mccumber": {...}}`` of the points, or an
    ``error`` when the scan has no usable anchor step."""
    p = params
    usable = [pt for pt in points if pt.get("ln_s_off") is not None and pt.get("probe_wavelength_m")]
    anchors = [pt for pt in usable if is_anchor(p, pt["probe_wavelength_m"])]
    if not anchors:
        return {"error": f"no step at the bench file's probe wavelength ({p.probe_wavelength * 1e9:.4g} nm)"}
    nl = p.n_total * p.length
    sa0, se0 = p.sigma_a, p.sigma_e
    rf = float(physics.fresnel_reflectance(p.refractive_index))
    b_off0 = _held(p, p.probe_wavelength, sa0, se0)
    u_sum = p.u_cross_sections * math.hypot(se0, sa0) / (se0 + sa0)
    rel_nl = math.hypot(p.u_n_total, p.u_length / p.length)
    entries = []
    for pt in usable:
        lam = float(pt["probe_wavelength_m"])
        t = _t(pt)
        anchor = is_anchor(p, lam)
        ln_s0, var_s0 = _interp(anchors, t, "ln_s_off", "ln_s_off_sigma")
        lnr0, var_r0 = _interp(anchors, t, "ln_ratio", "ln_ratio_sigma")
        # the sample-out level: the anchor's transmission from the bench file (probe-held part in)
        ln_empty = float(
            gain_spectrum.empty_beam_ln_level(ln_s0, sa0 - (sa0 + se0) * b_off0, p.n_total, p.length, rf)
        )
        beta_p = lnr0 / ((sa0 + se0) * nl)  # pump-induced, above the probe-held part
        beta_on = beta_p + b_off0
        lnr, var_r = float(pt["ln_ratio"]), float(pt["ln_ratio_sigma"]) ** 2
        b_on = beta_on
        if anchor:
            sa, se, noise_a, noise_sum, d_ln = sa0, se0, 0.0, 0.0, 0.0
        else:
            d_ln = pt["ln_s_off"] - ln_s0
            bl = float(
                gain_spectrum.absorption_from_transmission(pt["ln_s_off"] - ln_empty, p.n_total, p.length, rf)
            )
            sa, se = bl, se0
            for _ in range(3):  # fixed point: the probe's own rates at this step's cross-sections
                b_off = _held(p, lam, sa, se)
                sa = bl + (sa + se) * b_off
                b_on = pumped_fraction(p, beta_on, p.probe_wavelength, (sa0, se0), lam, (sa, se))
                if not b_on - b_off > 0:
                    break
                s_sum = lnr / (nl * (b_on - b_off))
                se = s_sum - sa
            noise_a = math.sqrt(pt["ln_s_off_sigma"] ** 2 + var_s0) / nl
            s_sum = sa + se
            noise_sum = math.hypot(
                s_sum * math.sqrt(var_r) / lnr if lnr else math.inf,
                s_sum * math.sqrt(var_r0) / lnr0 if lnr0 else math.inf,
            )
        s_sum = sa + se
        noise_e = math.hypot(noise_sum, noise_a)
        sys_a = math.hypot(p.u_cross_sections * sa0, rel_nl * abs(d_ln) / nl)
        sys_sum = u_sum * s_sum
        sys_e = math.hypot(sys_sum, sys_a)
        noise_beta = beta_on * math.sqrt(var_r0) / abs(lnr0) if lnr0 else math.inf
        sys_beta = beta_p * math.hypot(u_sum, rel_nl)
        beta = b_on  # the pumped excited fraction at this wavelength
        sigma_g = float(gain_spectrum.gain_cross_section(se, sa, min(max(beta, 0.0), 1.0)))
        # d sigma_g = beta d sigma_e - (1 - beta) d sigma_a with d sigma_e = d sigma_sum - d sigma_a
        noise_g = math.hypot(beta * noise_sum, noise_a)
        entries.append(
            {
                "wavelength_m": {"value": lam, "sigma": 0.0},
                "sigma_a_m2": _q(sa, noise_a, sys_a),
                "sigma_e_m2": _q(se, noise_e, sys_e),
                "sigma_g_m2": _q(sigma_g, noise_g, math.hypot(beta * sys_sum, sys_a)),
                "ln_ratio": _q(lnr, math.sqrt(var_r), 0.0),
                "beta": _q(beta, noise_beta, sys_beta),
                # covariance of the sigma_e and sigma_a errors: sigma_e = sigma_sum - sigma_a
                "cov_sigma_e_sigma_a": -(noise_a**2 + sys_a**2),
                "anchor": anchor,
                "t_start": pt.get("t_start"),
                "t_end": pt.get("t_end"),
            }
        )
    entries.sort(key=lambda e: e["wavelength_m"]["value"])
    out: dict[str, Any] = {"entries": entries, "family": _family(entries)}
    if p.zero_line_energy is not None:
        out["mccumber"] = _mccumber(p, entries)
    return out


def _family(entries: list[dict[str, Any]]) -> dict[str, Any]:
    lam = np.array([e["wavelength_m"]["value"] for e in entries])
    sa = np.array([e["sigma_a_m2"]["value"] for e in entries])
    se = np.array([e["sigma_e_m2"]["value"] for e in entries])
    betas = np.array(FAMILY_BETAS)
    g = gain_spectrum.gain_cross_section(se[None, :], sa[None, :], betas[:, None])
    return {
        "wavelength_m": [float(x) for x in lam],
        "beta": [float(b) for b in betas],
        "sigma_g_m2": [[float(x) for x in row] for row in np.atleast_2d(g)],
    }


def _mccumber(p: EstimatorParams, entries: list[dict[str, Any]]) -> dict[str, Any]:
    """Reciprocity at each measured (non-anchor) wavelength where both cross-sections are positive."""
    rows = [
        e
        for e in entries
        if not e["anchor"] and e["sigma_a_m2"]["value"] > 0 and e["sigma_e_m2"]["value"] > 0
    ]
    if not rows:
        return {"error": "no measured wavelength with positive sigma_a and sigma_e"}
    ue = np.array([e["sigma_e_m2"]["sigma"] for e in rows])
    ua = np.array([e["sigma_a_m2"]["sigma"] for e in rows])
    cov = np.array([e["cov_sigma_e_sigma_a"] for e in rows])
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.clip(np.where(ue * ua > 0, cov / (ue * ua), 0.0), -1.0, 1.0)
    check = gain_spectrum.mccumber_reciprocity(
        [e["wavelength_m"]["value"] for e in rows],
        [e["sigma_e_m2"]["value"] for e in rows],
        [e["sigma_a_m2"]["value"] for e in rows],
        ue,
        ua,
        p.zero_line_energy,
        p.temperature,
        correlation=rho,
    )
    far = [float(rows[i]["wavelength_m"]["value"]) for i in np.flatnonzero(check.far)]
    return {
        "wavelength_m": [e["wavelength_m"]["value"] for e in rows],
        "deviation": [float(x) for x in check.deviation],
        "sigma": [float(x) for x in check.sigma],
        "z": [float(x) for x in check.z],
        "exponent": [float(x) for x in check.exponent],
        "far_from_zero_line_m": far,
        "warning": (
            f"{len(far)} wavelength(s) lie more than {gain_spectrum.FAR_FROM_ZERO_LINE:g} kT from the zero "
            "line: there the McCumber factor amplifies errors of the weaker cross-section and of the zero line"
            if far
            else ""
        ),
        "max_abs_z": float(np.max(np.abs(check.z))),
    }
