"""The Voigt lineshape, its FWHM and its fit (absolute sigma, covariance inflated by chi-square
above 1; see `bench.physics.fitting`)."""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special

from bench.physics.fitting.result import (
    FitResult,
    checked_xy,
    fit_result,
    inflate_covariance,
)


def voigt_line(x, height, centre, sigma_gauss, gamma_lorentz):
    """A Voigt line of peak value ``height`` at ``centre``.

    ``height * V(x - centre; sigma, gamma) / V(0; sigma, gamma)`` with ``V`` the Voigt
    profile (``scipy.special.voigt_profile``): the convolution of a Gaussian of standard
    deviation ``sigma_gauss`` (inhomogeneous broadening) and a Lorentzian of half width at
    half maximum ``gamma_lorentz`` (homogeneous broadening), both in the unit of ``x``.

    References
    ----------
    .. [1] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 3.3 (homogeneous
       and inhomogeneous line broadening).
    .. [2] P. Virtanen et al., Nature Methods 17, 261 (2020) (``scipy.special.voigt_profile``).
    """
    if not (sigma_gauss >= 0 and gamma_lorentz >= 0 and sigma_gauss + gamma_lorentz > 0):
        raise ValueError("sigma_gauss, gamma_lorentz: must be zero or positive, not both zero")
    x = np.asarray(x, dtype=np.float64)
    return (
        height
        * special.voigt_profile(x - centre, sigma_gauss, gamma_lorentz)
        / special.voigt_profile(0.0, sigma_gauss, gamma_lorentz)
    )


def voigt_fwhm(sigma_gauss, gamma_lorentz) -> float:
    """Full width at half maximum of a Voigt profile (Olivero-Longbothum approximation).

    ``f_V = 0.5346 f_L + sqrt(0.2166 f_L^2 + f_G^2)`` with ``f_G = 2 sigma sqrt(2 ln 2)`` and
    ``f_L = 2 gamma``; accurate to about 0.02 %.

    References
    ----------
    .. [1] J. J. Olivero and R. L. Longbothum, "Empirical fits to the Voigt line width: a
       brief review", J. Quant. Spectrosc. Radiat. Transfer 17, 233 (1977).
    """
    if not (sigma_gauss >= 0 and gamma_lorentz >= 0):
        raise ValueError("sigma_gauss, gamma_lorentz: must be zero or positive")
    fg = 2.0 * sigma_gauss * math.sqrt(2.0 * math.log(2.0))
    fl = 2.0 * gamma_lorentz
    return float(0.5346 * fl + math.sqrt(0.2166 * fl * fl + fg * fg))


def fit_voigt(x, y, sigma) -> FitResult:
    """Fit a Voigt line (`voigt_line`) to a spectrum.

    Parameters
    ----------
    x : array_like
        Abscissa (here optical frequency in Hz), 1-d, at least 5 points.
    y : array_like
        The spectrum (here the pump-induced gain coefficient), same shape; a single peak.
    sigma : array_like
        Absolute standard uncertainty of each ``y``. The covariance is inflated by the reduced
        chi-square when that exceeds 1.

    Returns
    -------
    FitResult
        Parameters ``("height", "centre", "sigma_gauss", "gamma_lorentz")``, widths in the unit
        of ``x`` (Gaussian standard deviation, Lorentzian half width at half maximum).

    References
    ----------
    .. [1] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 3.3.
    .. [2] Particle Data Group, Prog. Theor. Exp. Phys. 2022, 083C01, Introduction, sec. 5.2.
    """
    xa, ya, sa = checked_xy(x, y, sigma, 5, "x", "y")
    order = np.argsort(xa)
    xa, ya, sa = xa[order], ya[order], sa[order]
    x_mid = 0.5 * (xa[0] + xa[-1])
    x_scale = float(xa[-1] - xa[0])
    if not x_scale > 0:
        raise ValueError("x: all abscissae are equal; nothing to fit")
    y_scale = float(np.max(np.abs(ya))) or 1.0
    u = (xa - x_mid) / x_scale
    v = ya / y_scale
    w = sa / y_scale
    i_peak = int(np.argmax(v))
    h0 = float(v[i_peak])
    c0 = float(u[i_peak])
    above = u[v >= 0.5 * h0]
    fwhm0 = float(max(above.max() - above.min(), 2.0 * np.min(np.diff(u)) if u.size > 1 else 0.1))
    # start with the width shared equally between the two mechanisms
    s0 = 0.5 * fwhm0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    g0 = 0.25 * fwhm0
    tiny = 1e-9

    def model(uu, h, c, s, g):
        return h * special.voigt_profile(uu - c, s, g) / special.voigt_profile(0.0, s, g)

    try:
        popt, pcov = optimize.curve_fit(
            model,
            u,
            v,
            p0=[h0, c0, s0, g0],
            sigma=w,
            absolute_sigma=True,
            bounds=([-np.inf, -np.inf, tiny, tiny], [np.inf, np.inf, np.inf, np.inf]),
            method="trf",
            maxfev=20000,
            x_scale="jac",
            xtol=1e-12,
            ftol=1e-12,
            gtol=1e-12,
        )
    except (RuntimeError, ValueError) as exc:
        raise ValueError(f"y: the Voigt fit did not converge ({exc})") from None
    resid = (v - model(u, *popt)) / w
    chi2 = float(resid @ resid)
    dof = u.size - 4
    pcov = inflate_covariance(pcov, chi2, dof)
    jt = np.diag([y_scale, x_scale, x_scale, x_scale])
    cov = jt @ pcov @ jt.T
    values = [popt[0] * y_scale, popt[1] * x_scale + x_mid, popt[2] * x_scale, popt[3] * x_scale]
    return fit_result(("height", "centre", "sigma_gauss", "gamma_lorentz"), values, cov, chi2, dof)
