"""Curve fits behind the estimator's figures: decay, pump saturation, lineshape, McCumber check.

Each fit is a pure function of arrays and returns a frozen `FitResult` (or `McCumberCheck`);
nothing here keeps state or does I/O. The non-linear fits use ``scipy.optimize.curve_fit``
with analytic Jacobians, and the parameters are rescaled internally so that the optimiser
sees numbers of order one whatever the SI magnitudes (seconds of 1e-4, hertz of 1e14).

Uncertainty conventions (say which one a caller gets):

* ``fit_exponential_decay``: the per-point ``sigma`` are relative weights only; the covariance
  is scaled by the reduced chi-square (``absolute_sigma=False``), so the reported sigma
  follows the scatter actually seen about the fitted curve.
* ``fit_saturation`` and ``fit_voigt``: the per-point ``sigma`` are taken as absolute standard
  uncertainties; when the reduced chi-square exceeds 1 the covariance is inflated by it (the
  scale-factor rule of the Particle Data Group), never deflated.

References
----------
.. [1] P. Virtanen et al., "SciPy 1.0: fundamental algorithms for scientific computing in
   Python", Nature Methods 17, 261 (2020) (``curve_fit``, ``voigt_profile``).
.. [2] Particle Data Group, R. L. Workman et al., "Review of Particle Physics", Prog. Theor.
   Exp. Phys. 2022, 083C01, Introduction, sec. 5.2 (scale factor for inconsistent data).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special, stats

from bench import physics

__all__ = [
    "FitResult",
    "McCumberCheck",
    "exponential_decay",
    "fit_exponential_decay",
    "fit_saturation",
    "thick_sample_fraction",
    "voigt_line",
    "voigt_fwhm",
    "fit_voigt",
    "mccumber_consistency",
]


@dataclass(frozen=True, eq=False)
class FitResult:
    """Parameters of a fit with their standard uncertainties.

    Attributes
    ----------
    names : tuple of str
        Parameter names, in the order of ``values``.
    values, sigmas : numpy.ndarray
        Best-fit values and standard uncertainties (square roots of the covariance diagonal).
    covariance : numpy.ndarray
        Covariance matrix of the parameters, after the scaling the fit function describes.
    chi2 : float
        Sum of squared weighted residuals at the optimum.
    dof : int
        Degrees of freedom (points minus parameters).
    """

    names: tuple[str, ...]
    values: np.ndarray
    sigmas: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int

    @property
    def chi2_reduced(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else math.nan

    def value(self, name: str) -> float:
        return float(self.values[self._index(name)])

    def sigma(self, name: str) -> float:
        return float(self.sigmas[self._index(name)])

    def _index(self, name: str) -> int:
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"no fit parameter {name!r} (has {', '.join(self.names)})") from None

    def as_dict(self) -> dict[str, float]:
        out = {}
        for n, v, s in zip(self.names, self.values, self.sigmas):
            out[n] = float(v)
            out[f"{n}_sigma"] = float(s)
        out["chi2_reduced"] = float(self.chi2_reduced)
        out["dof"] = int(self.dof)
        return out


# ---------------------------------------------------------------------------------------
# input checks
# ---------------------------------------------------------------------------------------


def _xy(x, y, sigma, min_points: int, x_name: str = "x", y_name: str = "y"):
    xa = np.asarray(x, dtype=np.float64)
    ya = np.asarray(y, dtype=np.float64)
    if xa.ndim != 1:
        raise ValueError(f"{x_name}: must be a 1-d array, got shape {xa.shape}")
    if ya.shape != xa.shape:
        raise ValueError(f"{y_name}: shape {ya.shape} does not match {x_name} {xa.shape}")
    if xa.size < min_points:
        raise ValueError(f"{x_name}: need at least {min_points} points, got {xa.size}")
    if not (np.all(np.isfinite(xa)) and np.all(np.isfinite(ya))):
        raise ValueError(f"{x_name}, {y_name}: must be finite")
    if sigma is None:
        sa = np.ones_like(xa)
    else:
        sa = np.broadcast_to(np.asarray(sigma, dtype=np.float64), xa.shape).copy()
        if not np.all(np.isfinite(sa)) or np.any(sa <= 0):
            raise ValueError("sigma: must be finite and positive")
    return xa, ya, sa


def _result(names, popt, pcov, chi2, dof) -> FitResult:
    pcov = np.asarray(pcov, dtype=np.float64)
    if not np.all(np.isfinite(pcov)):
        pcov = np.full_like(pcov, math.nan) if pcov.size else pcov
    sig = np.sqrt(np.clip(np.diag(pcov), 0.0, None)) if pcov.size else np.array([])
    return FitResult(tuple(names), np.asarray(popt, dtype=np.float64), sig, pcov, float(chi2), int(dof))


def _inflate(pcov: np.ndarray, chi2: float, dof: int) -> np.ndarray:
    """PDG scale factor: multiply the covariance by chi2/dof when that exceeds 1."""
    if dof > 0 and chi2 / dof > 1.0:
        return pcov * (chi2 / dof)
    return pcov


# ---------------------------------------------------------------------------------------
# exponential decay
# ---------------------------------------------------------------------------------------


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
    ta, ya, sa = _xy(t, y, sigma, 3, "t", "y")
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
            model, u, v, p0=[a0, 1.0], sigma=w, absolute_sigma=False, jac=jac,
            method="lm", maxfev=2000, xtol=1e-12, ftol=1e-12,
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
    return _result(("amplitude", "tau"), [sign * y_scale * a, t_scale / k], cov, chi2, dof)


# ---------------------------------------------------------------------------------------
# pump saturation
# ---------------------------------------------------------------------------------------


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
    pa, ba, sa = _xy(p, beta, sigma, 3, "p", "beta")
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
            model, x, ba, p0=[bmax0, ps0], sigma=sa, absolute_sigma=True, jac=jac,
            bounds=([0.0, 1e-9], [1.0, np.inf]), method="trf", maxfev=5000,
            xtol=1e-12, ftol=1e-12, gtol=1e-12,
        )
    except (RuntimeError, ValueError) as exc:
        raise ValueError(f"beta: the saturation fit did not converge ({exc})") from None
    resid = (ba - model(x, *popt)) / sa
    chi2 = float(resid @ resid)
    dof = x.size - 2
    pcov = _inflate(pcov, chi2, dof)
    jt = np.diag([1.0, p_scale])
    cov = jt @ pcov @ jt.T
    return _result(("beta_max", "p_sat"), [popt[0], popt[1] * p_scale], cov, chi2, dof)


# ---------------------------------------------------------------------------------------
# Voigt lineshape
# ---------------------------------------------------------------------------------------


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
    return height * special.voigt_profile(x - centre, sigma_gauss, gamma_lorentz) / special.voigt_profile(
        0.0, sigma_gauss, gamma_lorentz
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
    xa, ya, sa = _xy(x, y, sigma, 5, "x", "y")
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
            model, u, v, p0=[h0, c0, s0, g0], sigma=w, absolute_sigma=True,
            bounds=([-np.inf, -np.inf, tiny, tiny], [np.inf, np.inf, np.inf, np.inf]),
            method="trf", maxfev=20000, x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12,
        )
    except (RuntimeError, ValueError) as exc:
        raise ValueError(f"y: the Voigt fit did not converge ({exc})") from None
    resid = (v - model(u, *popt)) / w
    chi2 = float(resid @ resid)
    dof = u.size - 4
    pcov = _inflate(pcov, chi2, dof)
    jt = np.diag([y_scale, x_scale, x_scale, x_scale])
    cov = jt @ pcov @ jt.T
    values = [popt[0] * y_scale, popt[1] * x_scale + x_mid, popt[2] * x_scale, popt[3] * x_scale]
    return _result(("height", "centre", "sigma_gauss", "gamma_lorentz"), values, cov, chi2, dof)


# ---------------------------------------------------------------------------------------
# McCumber consistency of a measured gain spectrum
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class McCumberCheck:
    """Whether a measured pump-induced gain spectrum agrees with McCumber cross-sections.

    The measured ``ln R(lambda) = (sigma_e + sigma_a)(lambda) L <N2>`` is fitted with one free
    scale ``k = L <N2>`` to two shapes: the configured sum ``sigma_a + sigma_e``, and the sum
    predicted from the configured absorption alone, ``sigma_a (1 + exp((epsilon - h nu) / kT))``
    (McCumber). Each fit gives a chi-square; ``consistent`` is True when the McCumber shape
    fits with a chi-square probability of at least ``p_min``.

    Attributes
    ----------
    scale_configured, scale_mccumber : float
        Fitted ``L <N2>`` (m^-2) for each shape.
    scale_mccumber_sigma : float
        Standard uncertainty of ``scale_mccumber`` (absolute, from the given sigmas).
    chi2_configured, chi2_mccumber : float
        Reduced chi-square of each fit.
    p_value_mccumber : float
        Probability of a chi-square at least this large if the McCumber shape is right.
    config_max_log_deviation : float
        ``max |ln(sigma_e_configured / sigma_e_McCumber)|`` over the points: how far the
        configured spectra themselves are from the McCumber relation.
    consistent : bool
    dof : int
    """

    scale_configured: float
    scale_mccumber: float
    scale_mccumber_sigma: float
    chi2_configured: float
    chi2_mccumber: float
    p_value_mccumber: float
    config_max_log_deviation: float
    consistent: bool
    dof: int

    def as_dict(self) -> dict:
        return {k: (bool(v) if isinstance(v, (bool, np.bool_)) else (int(v) if k == "dof" else float(v)))
                for k, v in self.__dict__.items()}


def _scale_fit(y: np.ndarray, s: np.ndarray, shape: np.ndarray) -> tuple[float, float, float]:
    """Weighted least-squares ``y = k shape``: (k, sigma_k, chi2)."""
    w = 1.0 / s**2
    sxx = float(np.sum(w * shape * shape))
    if not sxx > 0:
        raise ValueError("sigma_a: the predicted shape is zero at every wavelength")
    k = float(np.sum(w * shape * y)) / sxx
    r = (y - k * shape) / s
    return k, 1.0 / math.sqrt(sxx), float(r @ r)


def mccumber_consistency(wavelength, ln_ratio, sigma, sigma_a, sigma_e, epsilon: float,
                         temperature: float, *, p_min: float = 0.01) -> McCumberCheck:
    """Check a measured gain spectrum against the McCumber relation (see `McCumberCheck`).

    Parameters
    ----------
    wavelength : array_like
        Probe wavelengths (m), 1-d, at least 2.
    ln_ratio : array_like
        Measured ln R at each wavelength.
    sigma : array_like
        Standard uncertainty of each ``ln_ratio`` (positive).
    sigma_a, sigma_e : array_like
        Configured absorption and emission cross-sections (m^2) at each wavelength.
    epsilon : float
        Zero-line (net excitation) energy in J.
    temperature : float
        Sample temperature in K.
    p_min : float, optional
        Smallest chi-square probability still called consistent (default 0.01).

    References
    ----------
    .. [1] D. E. McCumber, "Einstein relations connecting broadband emission and absorption
       spectra", Phys. Rev. 136, A954 (1964).
    .. [2] S. A. Payne et al., IEEE J. Quantum Electron. 28, 2619 (1992).
    """
    lam, y, s = _xy(wavelength, ln_ratio, sigma, 2, "wavelength", "ln_ratio")
    sa = np.asarray(sigma_a, dtype=np.float64)
    se = np.asarray(sigma_e, dtype=np.float64)
    for name, arr in (("sigma_a", sa), ("sigma_e", se)):
        if arr.shape != lam.shape:
            raise ValueError(f"{name}: shape {arr.shape} does not match wavelength {lam.shape}")
        if not np.all(np.isfinite(arr)) or np.any(arr < 0):
            raise ValueError(f"{name}: cross-sections must be finite, zero or positive")
    if not 0.0 < p_min < 1.0:
        raise ValueError(f"p_min: must be between 0 and 1, got {p_min!r}")
    se_mc = np.asarray(physics.mccumber_emission(lam, sa, epsilon, temperature), dtype=np.float64)
    if not np.all(np.isfinite(se_mc)):
        raise ValueError("epsilon, temperature: the McCumber factor overflows at these wavelengths")
    k_cfg, _, chi2_cfg = _scale_fit(y, s, sa + se)
    k_mc, sk_mc, chi2_mc = _scale_fit(y, s, sa + se_mc)
    dof = lam.size - 1
    both = (se > 0) & (se_mc > 0)
    dev = float(np.max(np.abs(np.log(se[both] / se_mc[both])))) if np.any(both) else math.nan
    p = float(stats.chi2.sf(chi2_mc, dof)) if dof > 0 else math.nan
    return McCumberCheck(
        scale_configured=k_cfg,
        scale_mccumber=k_mc,
        scale_mccumber_sigma=sk_mc,
        chi2_configured=chi2_cfg / dof if dof > 0 else math.nan,
        chi2_mccumber=chi2_mc / dof if dof > 0 else math.nan,
        p_value_mccumber=p,
        config_max_log_deviation=dev,
        consistent=bool(dof > 0 and p >= p_min),
        dof=dof,
    )
