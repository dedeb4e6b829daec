"""Exponential decay: the model and its fit (covariance scaled by the reduced chi-square;
see `bench.physics.fitting`)."""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize

from bench.physics.fitting.result import FitResult, checked_xy, fit_result


def exponential_decay(t, amplitude, tau):
    """The decay model ``amplitude * exp(-t / tau)``.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
       (spontaneous decay of the upper-state population).
    """
    if not tau > 0:
        raise ValueError(f"tau: must be positive, got {tau!r}")
    return amplitude * np.exp(-np.asarray(t, dtype=np.float64) / tau)


def fit_exponential_decay(t, y, sigma=None, *, tau_guess: float | None = None) -> FitResult:
    """Fit ``y = amplitude * exp(-t / tau)`` by weighted least squares.

    Parameters
    ----------
    t : array_like
        Times (s) after the start of the decay, 1-d, at least 3 points.
    y : array_like
        The decaying signal (here ln R(t)), same shape.
    sigma : array_like, optional
        Relative standard uncertainties of ``y`` (weights ``1 / sigma**2``); equal weights if
        omitted. Only their ratios matter: the covariance is scaled by the reduced chi-square
        (``curve_fit(..., absolute_sigma=False)``).
    tau_guess : float, optional
        A starting lifetime (s); by default from a straight-line fit of ``ln y`` against ``t``.

    Returns
    -------
    FitResult
        Parameters ``("amplitude", "tau")``.

    Raises
    ------
    ValueError
        Bad inputs, or no decay to fit (the signal does not fall with time).

    References
    ----------
    .. [1] P. R. Bevington and D. K. Robinson, *Data Reduction and Error Analysis for the
       Physical Sciences*, 3rd ed., McGraw-Hill, 2003, ch. 8 (least squares, parameter
       uncertainties scaled by the reduced chi-square).
    .. [2] P. Virtanen et al., Nature Methods 17, 261 (2020) (``scipy.optimize.curve_fit``).
    """
    ta, ya, sa = checked_xy(t, y, sigma, 3, "t", "y")
    if tau_guess is not None and not (math.isfinite(tau_guess) and tau_guess > 0):
        raise ValueError(f"tau_guess: must be a positive time in s, got {tau_guess!r}")
    span = float(np.max(ta) - np.min(ta))
    if not span > 0:
        raise ValueError("t: all times are equal; nothing to fit")
    sign = 1.0 if ya[np.argmax(np.abs(ya))] >= 0 else -1.0
    yy = sign * ya
    # starting point: a weighted straight line through ln y where y is clearly positive
    if tau_guess is None:
        good = yy > 0.05 * np.max(yy)
        if np.count_nonzero(good) >= 2 and np.ptp(ta[good]) > 0:
            slope, _ = np.polyfit(ta[good], np.log(yy[good]), 1, w=yy[good] / sa[good])
            tau0 = -1.0 / slope if slope < 0 else span
        else:
            tau0 = span
        tau0 = float(np.clip(tau0, span * 1e-3, span * 1e3))
    else:
        tau0 = float(tau_guess)
    # scale: time in units of tau0, amplitude in units of max|y|
    t_scale = tau0
    y_scale = float(np.max(np.abs(yy))) or 1.0
    u = ta / t_scale
    v = yy / y_scale
    w = sa / y_scale

    def model(uu, a, k):  # k = t_scale / tau: a rate, so the model is smooth through k = 0
        return a * np.exp(-k * uu)

    def jac(uu, a, k):
        e = np.exp(-k * uu)
        return np.column_stack([e, -a * uu * e])

    a0 = float(max(v[np.argmin(u)], 1e-3) * np.exp(np.min(u)))
    try:
        popt, pcov = optimize.curve_fit(
            model,
            u,
            v,
            p0=[a0, 1.0],
            sigma=w,
            absolute_sigma=False,
            jac=jac,
            method="lm",
            maxfev=2000,
            xtol=1e-12,
            ftol=1e-12,
        )
    except (RuntimeError, optimize.OptimizeWarning) as exc:
        raise ValueError(f"y: the exponential fit did not converge ({exc})") from None
    a, k = popt
    if not k > 0:
        raise ValueError("y: the signal does not decay with time (fitted rate is not positive)")
    resid = (v - model(u, a, k)) / w
    chi2 = float(resid @ resid)
    dof = u.size - 2
    # back to SI: amplitude = sign * y_scale * a, tau = t_scale / k
    jt = np.array([[sign * y_scale, 0.0], [0.0, -t_scale / k**2]])
    cov = jt @ pcov @ jt.T
    return fit_result(("amplitude", "tau"), [sign * y_scale * a, t_scale / k], cov, chi2, dof)
