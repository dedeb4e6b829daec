"""Pump saturation: the excited fraction of a thick sample against pump power, and its fit
(absolute sigma, covariance inflated by chi-square above 1; see `bench.physics.fitting`)."""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special

from bench import physics
from bench.physics.fitting.result import (
    FitResult,
    checked_xy,
    fit_result,
    inflate_covariance,
)


def thick_sample_fraction(p, beta_max, p_sat, absorbance):
    """Length-averaged steady-state excited fraction of an optically thick, end-pumped sample.

    With a uniform (top-hat) pump absorbed along the sample, the pump's intensity obeys
    ``dI/dz = -(sigma_ap N1 - sigma_ep N2) I = -alpha0 I / (1 + I / I_sat)`` (the local excited
    fraction being ``beta_max s / (1 + s)``, ``s = I / I_sat``): the saturable-absorber form of
    Beer-Lambert, whose solution is ``s_L = W(s_0 exp(s_0 - A))`` with ``W`` the Lambert W
    function and ``A = alpha0 L = sigma_ap N L`` the unbleached pump absorbance. In the steady
    state every absorbed pump photon is balanced by a decay, so the length-averaged fraction is
    ``beta_max (s_0 - s_L) / A``. For ``A -> 0`` this tends to `bench.physics.beta_of_pump`.

    Parameters
    ----------
    p : float or array_like
        Pump power (W) at the sample, zero or positive; ``s_0 = p / p_sat``.
    beta_max : float
        ``sigma_ap / (sigma_ap + sigma_ep)``, in [0, 1].
    p_sat : float
        Pump saturation power (W): the saturation intensity times the pumped area.
    absorbance : float
        ``A = sigma_ap N L``, positive.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
       (rate equations) and sec. 6.1 (pump absorption).
    .. [2] R. M. Corless, G. H. Gonnet, D. E. G. Hare, D. J. Jeffrey and D. E. Knuth, "On the
       Lambert W function", Adv. Comput. Math. 5, 329 (1996) (the saturable-absorber
       transmission as an example).
    """
    pp = np.asarray(p, dtype=np.float64)
    if np.any(pp < 0) or not np.all(np.isfinite(pp)):
        raise ValueError("p: pump powers must be finite, zero or positive")
    if not 0.0 <= beta_max <= 1.0:
        raise ValueError(f"beta_max: must be in [0, 1], got {beta_max!r}")
    if not p_sat > 0:
        raise ValueError(f"p_sat: must be positive, got {p_sat!r}")
    if not (math.isfinite(absorbance) and absorbance > 0):
        raise ValueError(f"absorbance: must be positive, got {absorbance!r}")
    s0 = pp / p_sat
    # W(x) from its logarithm where x would overflow: W(x) = ln x - ln W(x), iterated
    log_x = np.log(np.maximum(s0, 1e-300)) + s0 - absorbance
    with np.errstate(over="ignore"):
        x = np.exp(np.minimum(log_x, 700.0))
    w = np.real(special.lambertw(x))
    big = log_x > 700.0
    if np.any(big):
        wb = log_x[big]
        for _ in range(8):
            wb = log_x[big] - np.log(wb)
        w = np.where(big, 0.0, w)
        w[big] = wb
    out = beta_max * (s0 - np.where(s0 > 0, w, 0.0)) / absorbance
    return out[()] if out.ndim == 0 else out


def fit_saturation(p, beta, sigma, *, absorbance: float | None = None) -> FitResult:
    """Fit steady-state excited fractions against pump power for ``beta_max`` and ``p_sat``.

    The model is ``beta_max (p/p_sat) / (1 + p/p_sat)`` (`bench.physics.beta_of_pump`, an
    optically thin sample) or, given the unbleached pump ``absorbance`` ``sigma_ap N L``, its
    length average over an optically thick sample (`thick_sample_fraction`).

    Parameters
    ----------
    p : array_like
        Pump power (W) of each step, or any measure proportional to the pump rate; zero or
        positive, at least 3 points with at least 2 distinct positive values.
    beta : array_like
        Excited fraction measured at each step.
    sigma : array_like
        Absolute standard uncertainty of each ``beta`` (positive). The covariance is inflated
        by the reduced chi-square when that exceeds 1.
    absorbance : float, optional
        Pump absorbance ``A = sigma_ap N L`` of the unpumped sample (thin-sample model if None).

    Returns
    -------
    FitResult
        Parameters ``("beta_max", "p_sat")`` with ``p_sat`` in the unit of ``p``. The fit is
        bounded to ``0 <= beta_max <= 1`` and ``p_sat > 0``.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
       (steady-state solution of the rate equations).
    .. [2] Particle Data Group, Prog. Theor. Exp. Phys. 2022, 083C01, Introduction, sec. 5.2.
    """
    pa, ba, sa = checked_xy(p, beta, sigma, 3, "p", "beta")
    if np.any(pa < 0):
        raise ValueError("p: pump powers must be zero or positive")
    if np.unique(pa[pa > 0]).size < 2:
        raise ValueError("p: need at least 2 distinct positive pump powers")
    if absorbance is not None and not (math.isfinite(absorbance) and absorbance > 0):
        raise ValueError(f"absorbance: must be positive or None, got {absorbance!r}")
    p_scale = float(np.max(pa))

    if absorbance is None:

        def model(x, bmax, ps):
            return physics.beta_of_pump(x, bmax, ps)

        def jac(x, bmax, ps):
            s = x / ps
            return np.column_stack([s / (1.0 + s), -bmax * s / (ps * (1.0 + s) ** 2)])
    else:

        def model(x, bmax, ps):
            return thick_sample_fraction(x, bmax, ps, absorbance)

        def jac(x, bmax, ps):
            # with s_L = W(s0 e^(s0 - A)): d s_L / d s0 = s_L (1 + s0) / (s0 (1 + s_L))
            s0 = x / ps
            base = thick_sample_fraction(x, 1.0, ps, absorbance)
            s_l = s0 - base * absorbance
            with np.errstate(invalid="ignore", divide="ignore"):
                ds_l = np.where(s0 > 0, s_l * (1 + s0) / (s0 * (1 + s_l)), 0.0)
            dbeta_ds0 = bmax * (1.0 - ds_l) / absorbance
            return np.column_stack([base, -dbeta_ds0 * s0 / ps])

    x = pa / p_scale
    b_top = float(np.clip(np.max(ba), 1e-6, 1.0))
    # starting point from the linearised thin form 1/beta = 1/bmax + (p_sat/bmax) / p
    pos = (pa > 0) & (ba > 0)
    bmax0, ps0 = min(1.0, 1.5 * b_top), 1.0
    if np.count_nonzero(pos) >= 2:
        slope, icpt = np.polyfit(1.0 / x[pos], 1.0 / ba[pos], 1)
        if icpt > 0 and slope > 0:
            bmax0, ps0 = min(1.0, 1.0 / icpt), slope / icpt
    bmax0 = float(np.clip(bmax0, 1e-6, 1.0 - 1e-9))
    ps0 = float(np.clip(ps0, 1e-3, 1e3))
    try:
        popt, pcov = optimize.curve_fit(
            model,
            x,
            ba,
            p0=[bmax0, ps0],
            sigma=sa,
            absolute_sigma=True,
            jac=jac,
            bounds=([0.0, 1e-9], [1.0, np.inf]),
            method="trf",
            maxfev=5000,
            xtol=1e-12,
            ftol=1e-12,
            gtol=1e-12,
        )
    except (RuntimeError, ValueError) as exc:
        raise ValueError(f"beta: the saturation fit did not converge ({exc})") from None
    resid = (ba - model(x, *popt)) / sa
    chi2 = float(resid @ resid)
    dof = x.size - 2
    pcov = inflate_covariance(pcov, chi2, dof)
    jt = np.diag([1.0, p_scale])
    cov = jt @ pcov @ jt.T
    return fit_result(("beta_max", "p_sat"), [popt[0], popt[1] * p_scale], cov, chi2, dof)
