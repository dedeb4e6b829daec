"""From lock-in readings to the medium's figures: ln R from X, Y and the DC level, the noise
of a mean of filtered readings, and the lifetime from the response against frequency.

The forward model is `bench.physics.lockin_response.lockin_reading`: a probe signal ``S(t) =
s_off exp(ln_ratio_on u(t))`` whose excitation ``u`` follows a 50 % square-wave pump with the
rates ``k_on`` and ``k_off``. Everything here works on the ratio ``(X + i Y) / S_dc`` of the
lock-in's output to the signal's DC level, in which ``s_off`` (and any slow change of the
probe power common to both) cancels, and inverts the model exactly, not to first order in
ln R: a ln R of 0.05 would otherwise be off by about 2.5 %.

References
----------
.. [1] J. H. Scofield, "Frequency-domain description of a lock-in amplifier", Am. J. Phys. 62,
   129 (1994).
.. [2] M. L. Meade, *Lock-in Amplifiers: Principles and Applications*, Peter Peregrinus, 1983,
   ch. 3 (RC output filters, their noise bandwidth).
.. [3] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006,
   ch. 5 (frequency-domain lifetimes from phase and modulation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from bench.physics.arguments import as_result, check_nonnegative, check_positive
from bench.physics.lockin_response import lockin_reading

__all__ = [
    "lockin_ratio",
    "ln_ratio_from_lockin_ratio",
    "rc_noise_bandwidth",
    "LockinLifetimeFit",
    "fit_lifetime_from_lockin",
]

#: ln R beyond which `ln_ratio_from_lockin_ratio` does not look (|ln R| of a sample's gain
#: change seen by a weak probe stays far inside).
LN_RATIO_LIMIT = 20.0


def lockin_ratio(frequency, k_on, k_off, ln_ratio_on):
    """``(X + i Y) / S_dc`` of the probe signal: the lock-in's output over the DC level.

    Exact in ``ln_ratio_on`` (`lockin_reading` with ``s_off = 1``); the phase is relative to
    the pump's fundamental (negative: lagging). For small ln R it tends to ``ln_ratio_on a /
    sqrt 2``, ``a`` the normalised fundamental (`square_wave_fundamental`).

    References
    ----------
    .. [1] J. H. Scofield, Am. J. Phys. 62, 129 (1994).
    """
    xy, dc = lockin_reading(frequency, k_on, k_off, ln_ratio_on, 1.0)
    return np.asarray(xy / dc, dtype=np.complex128)[()]


def ln_ratio_from_lockin_ratio(projected, frequency, k_on, k_off):
    """ln R of the CW pumped state from the lock-in's output over the DC level.

    ``projected`` is ``|X + i Y| / S_dc``, signed: negative when the output is nearer the
    opposite of the model's phase than the model's phase itself (a pump-induced loss). Solved
    exactly for ``ln_ratio_on`` with `lockin_ratio` (Brent's method, scipy.optimize.brentq);
    the magnitude only is used, so an instrument phase offset does not enter. Scalar
    arguments; ValueError when no ln R within +/- `LN_RATIO_LIMIT` gives ``projected``.

    References
    ----------
    .. [1] J. H. Scofield, Am. J. Phys. 62, 129 (1994).
    .. [2] R. P. Brent, *Algorithms for Minimization without Derivatives*, Prentice-Hall,
       1973, ch. 4.
    """
    q = float(projected)
    if not math.isfinite(q):
        raise ValueError(f"projected: expected a finite ratio, got {projected!r}")
    if q == 0.0:
        return 0.0
    sign = 1.0 if q > 0 else -1.0

    def g(lnr: float) -> float:
        return abs(complex(lockin_ratio(frequency, k_on, k_off, sign * lnr))) - abs(q)

    # first guess from the linear limit, then bracket outwards
    small = abs(complex(lockin_ratio(frequency, k_on, k_off, 1e-6))) / 1e-6
    guess = min(abs(q) / small, LN_RATIO_LIMIT)
    lo, hi = 0.0, max(guess, 1e-12)
    while g(hi) < 0:
        lo, hi = hi, hi * 2.0
        if hi > LN_RATIO_LIMIT:
            if g(LN_RATIO_LIMIT) < 0:
                raise ValueError(
                    f"projected: {q!r} is more than any ln R within +/-{LN_RATIO_LIMIT:g} gives "
                    f"at {float(frequency):g} Hz"
                )
            hi = LN_RATIO_LIMIT
            break
    root = optimize.brentq(g, lo, hi, xtol=1e-15, rtol=1e-13)
    return sign * float(root)


def rc_noise_bandwidth(time_constant, order):
    """Equivalent noise bandwidth (Hz, one-sided) of ``order`` equal RC poles of ``time_constant``.

    ``int_0^inf (1 + (2 pi f tc)^2)^-n df = Gamma(n - 1/2) / (4 sqrt(pi) Gamma(n) tc)``: 1/(4 tc)
    for one pole, 1/(8 tc) for two, 5/(64 tc) for four. The mean of the filter's output over a
    time T much longer than tc then has the variance of ``2 ENBW T`` independent readings: a
    reading's variance is ``S 2 ENBW`` for an input of two-sided noise density ``S`` at the
    reference frequency, the mean's ``S / T``.

    References
    ----------
    .. [1] M. L. Meade, *Lock-in Amplifiers: Principles and Applications*, Peter Peregrinus,
       1983, ch. 3 (equivalent noise bandwidth of RC output filters).
    """
    tc = check_positive(time_constant, "time_constant", " (a time constant in s)")
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or not 1 <= order <= 8:
        raise ValueError(f"order: expected a whole number of poles 1 ... 8, got {order!r}")
    n = int(order)
    return as_result(special.gamma(n - 0.5) / (4.0 * math.sqrt(math.pi) * special.gamma(n) * tc))


@dataclass(frozen=True)
class LockinLifetimeFit:
    """Result of `fit_lifetime_from_lockin` (rates in 1/s, times in s).

    ``chi2`` is the sum of squared weighted residuals (real and imaginary parts), ``dof`` their
    number minus the fitted parameters; the sigmas are inflated by sqrt(chi2 / dof) when that
    exceeds 1.
    """

    tau: float
    tau_sigma: float
    pump_rate: float
    pump_rate_sigma: float
    ln_ratio_on: float
    ln_ratio_on_sigma: float
    chi2: float
    dof: int


def fit_lifetime_from_lockin(frequency, ratio, sigma, *, probe_rate=0.0, pump_rate=None, tau_guess=None):
    """Fit the lifetime to the lock-in's output over the DC level against modulation frequency.

    Model: `lockin_ratio` (exact in ln R) with ``k_off = 1/tau + probe_rate`` and ``k_on = k_off
    + pump_rate``; fitted: ``tau``, ``ln_ratio_on`` and, unless given, ``pump_rate``. The data
    are the complex ratios ``(X + i Y) / S_dc`` at each frequency with the standard uncertainty
    ``sigma`` of each of their two components; the residuals are the real and imaginary parts
    of (model - data) / sigma, weighted least squares (scipy.optimize.least_squares, rates in
    log space so they stay positive). The phase carries the lifetime (``tan phi = -w tau`` in
    the first-order limit, Lakowicz ch. 5), the amplitude ln R and, through its fall with
    frequency, the pump rate. The covariance ``(J^T J)^-1`` is inflated by the reduced
    chi-square when it exceeds 1, never deflated.

    Parameters
    ----------
    frequency : array_like
        Modulation frequencies, Hz (at least 2; 3 with ``pump_rate`` fitted).
    ratio : array_like of complex
        ``(X + i Y) / S_dc`` at each frequency (phase relative to the pump's fundamental).
    sigma : array_like
        Standard uncertainty of the real and of the imaginary part of each ratio.
    probe_rate : float
        ``W_probe``, 1/s.
    pump_rate : float, optional
        ``W_p``, 1/s, when known.
    tau_guess : float, optional
        Start value, s; by default from the phase nearest -45 degrees.

    References
    ----------
    .. [1] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006, ch. 5.
    .. [2] P. Virtanen et al., "SciPy 1.0", Nature Methods 17, 261 (2020) (least_squares).
    .. [3] Particle Data Group, Prog. Theor. Exp. Phys. 2022, 083C01, sec. 5.2 (scale factor).
    """
    f = np.asarray(frequency, dtype=np.float64)
    z = np.asarray(ratio, dtype=np.complex128)
    s = np.broadcast_to(np.asarray(sigma, dtype=np.float64), f.shape)
    if f.ndim != 1 or z.shape != f.shape:
        raise ValueError(f"ratio: expected one complex ratio per frequency ({f.size}), got shape {z.shape}")
    if not (np.all(np.isfinite(f)) and np.all(f > 0)):
        raise ValueError("frequency: must be positive and finite")
    if not (np.all(np.isfinite(z.real)) and np.all(np.isfinite(z.imag))):
        raise ValueError("ratio: must be finite")
    if not (np.all(np.isfinite(s)) and np.all(s > 0)):
        raise ValueError("sigma: must be positive and finite")
    wprobe = float(check_nonnegative(probe_rate, "probe_rate"))
    wp_fixed = None if pump_rate is None else float(check_nonnegative(pump_rate, "pump_rate"))
    n_par = 2 + (wp_fixed is None)
    if 2 * f.size <= n_par:
        raise ValueError(f"frequency: {f.size} frequencies cannot determine {n_par} parameters")
    if tau_guess is None:
        ph = np.angle(z)
        i = int(np.argmin(np.abs(ph + math.pi / 4)))
        k_guess = 2 * math.pi * f[i] / max(math.tan(min(max(-ph[i], 0.05), 1.5)), 1e-3)
        tau_guess = 1.0 / max(k_guess - wprobe, 0.1 * k_guess)
    t0 = float(check_positive(tau_guess, "tau_guess"))
    lnr0 = float(math.sqrt(2.0) * np.max(np.abs(z)) / (2.0 / math.pi))

    def unpack(p):
        tau = math.exp(p[0]) * t0
        lnr = p[1]
        wp = math.exp(p[2]) / t0 if wp_fixed is None else wp_fixed
        return tau, lnr, wp

    def residuals(p):
        tau, lnr, wp = unpack(p)
        koff = 1.0 / tau + wprobe
        m = lockin_ratio(f, koff + wp, koff, lnr)
        d = (m - z) / s
        return np.concatenate([d.real, d.imag])

    p0 = [0.0, lnr0] + ([math.log(0.3)] if wp_fixed is None else [])
    sol = optimize.least_squares(residuals, np.array(p0), method="lm", x_scale="jac")
    tau, lnr, wp = unpack(sol.x)
    chi2 = float(np.sum(sol.fun**2))
    dof = 2 * f.size - n_par
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac)
    except np.linalg.LinAlgError:
        cov = np.full((n_par, n_par), np.inf)
    if dof > 0 and chi2 / dof > 1:
        cov = cov * (chi2 / dof)
    sig = np.sqrt(np.abs(np.diag(cov)))
    return LockinLifetimeFit(
        tau=float(tau),
        tau_sigma=float(tau * sig[0]),  # log parameter: sigma(x) = x sigma(log x)
        pump_rate=float(wp),
        pump_rate_sigma=float(wp * sig[2]) if wp_fixed is None else 0.0,
        ln_ratio_on=float(lnr),
        ln_ratio_on_sigma=float(sig[1]),
        chi2=chi2,
        dof=int(dof),
    )
