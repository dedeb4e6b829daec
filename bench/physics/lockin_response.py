"""The medium's response to a square-wave-modulated pump at the modulation frequency: what a
lock-in amplifier referenced to the pump reads, and the lifetime from its phase.

A 50 % square-wave pump (on during the first half of each period T = 1/f, from a rising edge)
drives the linear rate equation of the excited density (Svelto, ch. 7)::

    dN2/dt = k (n_ss - N2),   k_on = 1/tau + W_p + W_probe,   k_off = 1/tau + W_probe

with ``W_p = (sigma_ap + sigma_ep) Phi_p`` and ``W_probe = (sigma_as + sigma_es) Phi_s``: during
the on half N2 relaxes towards its pumped steady state ``n_on`` at the rate ``k_on``, during the
off half towards ``n_off`` (the probe-held baseline state) at ``k_off``. Everything here is
written for the normalised excitation ``u = (N2 - n_off) / (n_on - n_off)`` (0 = baseline, 1 =
the CW pumped state), so that ``ln R(t) = ln_ratio_on u(t)`` with ``ln_ratio_on`` the ln R a CW
pump at the same power would give.

Periodic steady state (derived here by matching the two exponential pieces at the edges; the
pieces themselves are the exact step solution, Koechner sec. 1.4): with ``h = T/2``,
``q_on = exp(-k_on h)``, ``q_off = exp(-k_off h)``, the values at the rising and falling edges
are ``u0 = q_off (1 - q_on) / (1 - q_on q_off)`` and ``u1 = 1 - q_on + q_on u0``, and
``u(t) = 1 + (u0 - 1) exp(-k_on t)`` on ``[0, h)``, ``u(h + s) = u1 exp(-k_off s)`` on
``[0, h)``.

Fundamental: the complex Fourier coefficient ``c1 = (1/T) int_0^T u(t) exp(-i w t) dt`` is,
piece by piece (``exp(-i w h) = -1``)::

    c1 = (1/T) [ 2/(i w) + (u0 - 1)(1 + q_on)/(k_on + i w) - u1 (1 + q_off)/(k_off + i w) ]

The pump's own square wave has ``c1 = 1/(i pi)`` (phase -pi/2 in this time origin). The
functions return ``a = 2 i c1``: the peak amplitude of u's fundamental as a complex number whose
argument is the phase relative to the pump's fundamental (0: in phase; negative: lagging). A
u that followed the pump exactly (k -> inf) gives ``a = 2/pi``. With ``k_on = k_off = k`` this
reduces to ``a = (2/pi) / (1 + i w / k)``: the first-order low pass of frequency-domain
lifetime measurements, amplitude ``(2/pi) / sqrt(1 + (w/k)^2)``, phase ``-atan(w/k)``
(Lakowicz, ch. 5; the same relation as the phase-shift method for luminescence lifetimes).

A lock-in referenced to the pump's fundamental reports, for an input whose component at f is
``A cos(w t + phi)`` (phase again relative to the pump's fundamental), ``X + i Y =
(A / sqrt 2) exp(i phi)`` in V rms (Scofield; Meade, ch. 1).

References
----------
.. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (rate equations).
.. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
.. [3] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006,
   ch. 5 (frequency-domain lifetime measurements: tan(phi) = w tau, m = 1/sqrt(1 + w^2 tau^2)).
.. [4] J. H. Scofield, "Frequency-domain description of a lock-in amplifier", Am. J. Phys. 62,
   129 (1994).
.. [5] M. L. Meade, *Lock-in Amplifiers: Principles and Applications*, Peter Peregrinus, 1983,
   ch. 1 and 3 (phase-sensitive detection, RC output filters).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from bench.physics.arguments import as_result, check_nonnegative, check_positive, check_real

#: Gauss-Legendre nodes per panel for the fundamental of exp(ln R(t)) (`lockin_reading`).
QUADRATURE_NODES = 24
#: Each half period is cut into panels at the fractions 0, 2^-PANELS, ..., 1/4, 1/2, 1, so the
#: fast transient after an edge gets nodes of its own however short it is against the half
#: period (accurate to 1e-12 while k h stays below about 2^PANELS x 10).
PANELS = 14
_GL_X0, _GL_W0 = np.polynomial.legendre.leggauss(QUADRATURE_NODES)
_EDGES = np.concatenate([[0.0], 2.0 ** -np.arange(PANELS - 1, -1, -1.0)])
_LO, _HI = _EDGES[:-1, None], _EDGES[1:, None]
#: nodes as fractions of a half period, and their weights (summing to 1)
_GL_X = ((_LO + _HI) / 2.0 + (_HI - _LO) / 2.0 * _GL_X0).ravel()
_GL_W = ((_HI - _LO) / 2.0 * _GL_W0).ravel()


def _rates(frequency, k_on, k_off):
    f = check_positive(frequency, "frequency", " (a modulation frequency in Hz)")
    kon = check_positive(k_on, "k_on", " (a rate in 1/s)")
    koff = check_positive(k_off, "k_off", " (a rate in 1/s)")
    return f, kon, koff


def _edges(f, kon, koff):
    """(h, q_on, q_off, u0, u1) of the periodic steady state (see module docstring)."""
    h = 0.5 / f
    q_on = np.exp(-kon * h)
    q_off = np.exp(-koff * h)
    # 1 - q_on q_off = -expm1(-(k_on + k_off) h): exact even when both rates are slow
    u0 = q_off * -np.expm1(-kon * h) / -np.expm1(-(kon + koff) * h)
    u1 = -np.expm1(-kon * h) + q_on * u0
    return h, q_on, q_off, u0, u1


def square_wave_edges(frequency, k_on, k_off):
    """Normalised excitation ``(u0, u1)`` at the rising and falling pump edges, periodic state.

    ``u = (N2 - n_off) / (n_on - n_off)``; see the module docstring for the derivation. The
    peak-to-peak swing is ``u1 - u0``; at low frequency ``u0 -> 0`` and ``u1 -> 1``.

    Parameters
    ----------
    frequency : float or array_like
        Modulation frequency, Hz (> 0).
    k_on, k_off : float or array_like
        Relaxation rates with the pump on and off, 1/s (> 0).

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7.
    .. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    _, _, _, u0, u1 = _edges(*_rates(frequency, k_on, k_off))
    return as_result(u0), as_result(u1)


def square_wave_state(t, frequency, k_on, k_off):
    """Normalised excitation ``u(t)`` of the periodic steady state (0 baseline, 1 CW pumped).

    ``t`` in s, counted from a rising pump edge (any real value: the state is periodic).

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7.
    .. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    tt = check_real(t, "t")
    f, kon, koff = _rates(frequency, k_on, k_off)
    h, _, _, u0, u1 = _edges(f, kon, koff)
    phase = np.mod(tt, 2.0 * h)
    on = phase < h
    u_on = 1.0 + (u0 - 1.0) * np.exp(-kon * np.where(on, phase, 0.0))
    u_off = u1 * np.exp(-koff * np.where(on, 0.0, phase - h))
    return as_result(np.where(on, u_on, u_off))


def square_wave_mean(frequency, k_on, k_off):
    """Time average of the normalised excitation ``u`` over one period (the DC part).

    ``(1/T) [h + (u0 - 1)(1 - q_on)/k_on + u1 (1 - q_off)/k_off]``, integrated piece by piece;
    1/2 at low frequency, ``k_off / (k_on + k_off)`` at high frequency.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7.
    """
    f, kon, koff = _rates(frequency, k_on, k_off)
    h, q_on, q_off, u0, u1 = _edges(f, kon, koff)
    total = h + (u0 - 1.0) * (1.0 - q_on) / kon + u1 * (1.0 - q_off) / koff
    return as_result(total * f)


def square_wave_fundamental(frequency, k_on, k_off):
    """Complex fundamental ``a`` of the normalised excitation, relative to the pump's fundamental.

    ``|a|`` is the peak amplitude of u's component at the modulation frequency (``2/pi`` for a
    response that follows the pump exactly), ``angle(a)`` its phase relative to the pump's own
    fundamental (negative: lagging). Closed form of the module docstring, vectorised (arguments
    broadcast).

    Parameters
    ----------
    frequency : float or array_like
        Modulation frequency, Hz.
    k_on, k_off : float or array_like
        Relaxation rates with the pump on (``1/tau + W_p + W_probe``) and off
        (``1/tau + W_probe``), 1/s.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (the rate equation).
    .. [2] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006,
       ch. 5 (its limit k_on = k_off: the frequency-domain lifetime relation).
    """
    f, kon, koff = _rates(frequency, k_on, k_off)
    h, q_on, q_off, u0, u1 = _edges(f, kon, koff)
    w = 2.0 * math.pi * f
    c1 = f * (
        2.0 / (1j * w) + (u0 - 1.0) * (1.0 + q_on) / (kon + 1j * w) - u1 * (1.0 + q_off) / (koff + 1j * w)
    )
    return np.asarray(2j * c1, dtype=np.complex128)[()]


def first_order_fundamental(frequency, k):
    """Small-signal limit (``k_on = k_off = k``): ``a = (2/pi) / (1 + i w / k)``.

    Amplitude ``(2/pi) / sqrt(1 + (w/k)^2)``, phase ``-atan(w/k)``: a first-order low pass
    with corner ``k / (2 pi)``, the frequency-domain lifetime relation ``tan(phi) = -w tau``
    when ``k = 1/tau``.

    References
    ----------
    .. [1] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006,
       ch. 5 (phase angle and modulation of a single-exponential decay).
    """
    f = check_positive(frequency, "frequency", " (a modulation frequency in Hz)")
    kk = check_positive(k, "k", " (a rate in 1/s)")
    w = 2.0 * math.pi * f
    return np.asarray((2.0 / math.pi) / (1.0 + 1j * w / kk), dtype=np.complex128)[()]


def lockin_reading(frequency, k_on, k_off, ln_ratio_on, s_off):
    """What a lock-in referenced to the pump reads of the probe detector: ``(X + i Y, S_dc)``.

    The probe signal is ``S(t) = s_off exp(ln_ratio_on u(t))`` (Beer-Lambert, the probe's
    transmission relative to the baseline). Returns the complex lock-in output ``X + i Y`` in
    V rms (``a_S / sqrt 2``, ``a_S`` the complex peak fundamental of S relative to the pump's
    fundamental) and the DC level ``S_dc`` (time average of S, what an auxiliary input
    low-passed over many periods reads). The exponential is integrated over the closed-form
    ``u(t)`` by composite Gauss-Legendre quadrature (`PANELS` panels per half period, graded
    towards the edge, `QUADRATURE_NODES` nodes each), so this is exact
    for any ``ln_ratio_on``; for small ``ln_ratio_on`` it tends to ``s_off ln_ratio_on
    square_wave_fundamental(...) / sqrt 2``.

    Parameters
    ----------
    frequency : float or array_like
        Modulation frequency, Hz.
    k_on, k_off : float or array_like
        Relaxation rates with the pump on and off, 1/s.
    ln_ratio_on : float or array_like
        ln R of the CW pumped state relative to the baseline (any finite value).
    s_off : float or array_like
        Probe detector level at the baseline, V.

    References
    ----------
    .. [1] J. H. Scofield, Am. J. Phys. 62, 129 (1994) (lock-in output X, Y in rms).
    .. [2] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7.
    .. [3] W. H. Press et al., *Numerical Recipes*, 3rd ed., Cambridge, 2007, sec. 4.6
       (Gauss-Legendre quadrature).
    """
    f, kon, koff = _rates(frequency, k_on, k_off)
    lr = check_real(ln_ratio_on, "ln_ratio_on")
    s0 = check_real(s_off, "s_off")
    f, kon, koff, lr, s0 = np.broadcast_arrays(f, kon, koff, lr, s0)
    h, _, _, u0, u1 = _edges(f, kon, koff)
    w = 2.0 * math.pi * f
    s = h[..., None] * _GL_X  # time into the half period  # time into the half period
    u_on = 1.0 + (u0 - 1.0)[..., None] * np.exp(-kon[..., None] * s)
    u_off = u1[..., None] * np.exp(-koff[..., None] * s)
    sig_on = np.exp(lr[..., None] * u_on)
    sig_off = np.exp(lr[..., None] * u_off)
    rot = np.exp(-1j * w[..., None] * s)
    weight = _GL_W  # sum over one half: h * sum(weight * g) = integral
    # off half: exp(-i w (h + s)) = -exp(-i w s)
    c1 = f * h * np.sum(weight * (sig_on - sig_off) * rot, axis=-1)
    c0 = f * h * np.sum(weight * (sig_on + sig_off), axis=-1)
    xy = s0 * 2j * c1 / math.sqrt(2.0)
    return np.asarray(xy, dtype=np.complex128)[()], as_result(s0 * c0)


def ln_ratio_from_lockin(x, y, s_dc, frequency, k_on, k_off):
    """ln R of the CW pumped state from a lock-in reading (linearised): ``sqrt 2 Re[(X + iY) / (S a)]``.

    Inverts `lockin_reading` to first order in ln R, with ``S`` the DC level and ``a`` the
    normalised fundamental `square_wave_fundamental`: the relative error is of order
    ``ln_ratio_on / 2`` (use `lockin_reading` to correct it when ln R is not small). The
    projection on ``a`` keeps the noise of the quadrature that the response cannot have.

    References
    ----------
    .. [1] J. H. Scofield, Am. J. Phys. 62, 129 (1994).
    .. [2] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7.
    """
    xx = check_real(x, "x")
    yy = check_real(y, "y")
    s = check_positive(s_dc, "s_dc", " (a DC level in V)")
    a = square_wave_fundamental(frequency, k_on, k_off)
    z = (xx + 1j * yy) * math.sqrt(2.0) / (s * a)
    return as_result(np.real(z))


def rc_settle_time(time_constant, order, tolerance):
    """Time for an ``order``-pole RC output filter to settle within ``tolerance`` of a step.

    The step response of ``order`` equal RC poles is ``1 - Q(order, t/tc)`` with Q the
    regularised upper incomplete gamma function (the Erlang survival function), so the settle
    time is ``tc Q^-1(order, tolerance)`` (scipy.special.gammainccinv). E.g. 4.6 tc for one pole
    and 6.6 tc for two to settle within 1 %.

    References
    ----------
    .. [1] M. L. Meade, *Lock-in Amplifiers: Principles and Applications*, Peter Peregrinus,
       1983, ch. 3 (cascaded RC output filters).
    """
    tc = check_positive(time_constant, "time_constant", " (a time constant in s)")
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or not 1 <= order <= 8:
        raise ValueError(f"order: expected a whole number of poles 1 ... 8, got {order!r}")
    tol = check_positive(tolerance, "tolerance")
    if np.any(tol >= 1):
        raise ValueError(f"tolerance: must be below 1, got {float(np.max(tol))!r}")
    return as_result(tc * special.gammainccinv(int(order), tol))


@dataclass(frozen=True)
class LifetimeFit:
    """Result of `fit_lifetime_from_phase`.

    Attributes
    ----------
    tau, tau_sigma : float
        Lifetime and its standard uncertainty, s.
    pump_rate, pump_rate_sigma : float
        ``W_p`` (fitted, or the value given with sigma 0), 1/s.
    ln_ratio_on, ln_ratio_on_sigma : float
        Amplitude scale (nan when no amplitudes were given).
    chi2 : float
        Sum of squared weighted residuals.
    dof : int
        Points minus fitted parameters.
    """

    tau: float
    tau_sigma: float
    pump_rate: float
    pump_rate_sigma: float
    ln_ratio_on: float
    ln_ratio_on_sigma: float
    chi2: float
    dof: int


def _vector(values, name: str, n: int | None) -> np.ndarray:
    arr = np.asarray(check_real(values, name), dtype=np.float64)
    if arr.ndim != 1:
        arr = np.broadcast_to(arr, (n,)).copy() if (arr.ndim == 0 and n) else arr
    if arr.ndim != 1 or (n is not None and arr.size != n):
        raise ValueError(f"{name}: expected {n if n else 'a list of'} values, got shape {arr.shape}")
    return arr


def fit_lifetime_from_phase(
    frequency,
    phase,
    phase_sigma,
    *,
    amplitude=None,
    amplitude_sigma=None,
    probe_rate=0.0,
    pump_rate=None,
    tau_guess=None,
):
    """Fit the lifetime from lock-in phases (and amplitudes) against modulation frequency.

    Model: `square_wave_fundamental` with ``k_off = 1/tau + probe_rate`` and ``k_on = k_off +
    pump_rate``. ``phase`` (rad, relative to the pump's fundamental, negative when lagging) is
    fitted with ``tau`` (and ``pump_rate`` when it is not given); amplitudes, when given, add
    the scale ``ln_ratio_on`` (``amplitude = |ln_ratio_on a|``, e.g. ``sqrt 2 R / S_dc``) and make
    ``pump_rate`` much better determined. Weighted least squares (scipy.optimize.least_squares,
    parameters in log space so they stay positive), the sigmas taken as absolute standard
    uncertainties; the covariance ``(J^T J)^-1`` is inflated by the reduced chi-square when it
    exceeds 1, never deflated.

    Parameters
    ----------
    frequency, phase, phase_sigma : array_like
        Modulation frequencies (Hz), phases and their standard uncertainties (rad).
    amplitude, amplitude_sigma : array_like, optional
        Peak amplitudes of ln R's fundamental and their uncertainties.
    probe_rate : float
        ``W_probe``, 1/s (0 for a weak probe).
    pump_rate : float, optional
        ``W_p``, 1/s, if known; fitted otherwise (then at least 3 frequencies).
    tau_guess : float, optional
        Start value, s; by default from the phase nearest -45 degrees.

    References
    ----------
    .. [1] J. R. Lakowicz, *Principles of Fluorescence Spectroscopy*, 3rd ed., Springer, 2006,
       ch. 5 (fitting lifetimes to phase and modulation against frequency).
    .. [2] P. Virtanen et al., "SciPy 1.0", Nature Methods 17, 261 (2020) (least_squares).
    .. [3] Particle Data Group, Prog. Theor. Exp. Phys. 2022, 083C01, sec. 5.2 (scale factor).
    """
    f = _vector(frequency, "frequency", None)
    n = f.size
    if np.any(f <= 0):
        raise ValueError("frequency: must be positive")
    ph = _vector(phase, "phase", n)
    ps = _vector(phase_sigma, "phase_sigma", n)
    if np.any(ps <= 0):
        raise ValueError("phase_sigma: must be positive")
    wp_fixed = None if pump_rate is None else float(check_nonnegative(pump_rate, "pump_rate"))
    wprobe = float(check_nonnegative(probe_rate, "probe_rate"))
    use_amp = amplitude is not None
    if use_amp:
        if amplitude_sigma is None:
            raise ValueError("amplitude_sigma: needed with amplitude")
        amp = _vector(amplitude, "amplitude", n)
        asg = _vector(amplitude_sigma, "amplitude_sigma", n)
        if np.any(asg <= 0):
            raise ValueError("amplitude_sigma: must be positive")
    n_par = 1 + (wp_fixed is None) + use_amp
    n_data = n * (1 + use_amp)
    if n_data <= n_par:
        raise ValueError(f"frequency: {n} frequencies cannot determine {n_par} parameters")
    if tau_guess is None:
        # first-order limit: tan(phi) = -w / k at the point nearest -45 degrees
        i = int(np.argmin(np.abs(ph + math.pi / 4)))
        k_guess = 2 * math.pi * f[i] / max(math.tan(min(max(-ph[i], 0.05), 1.5)), 1e-3)
        tau_guess = 1.0 / max(k_guess - wprobe, 0.1 * k_guess)
    t0 = float(check_positive(tau_guess, "tau_guess"))

    def unpack(p):
        tau = math.exp(p[0]) * t0
        j = 1
        if wp_fixed is None:
            wp = math.exp(p[j]) / t0
            j += 1
        else:
            wp = wp_fixed
        scale = p[j] if use_amp else math.nan
        return tau, wp, scale

    def residuals(p):
        tau, wp, scale = unpack(p)
        koff = 1.0 / tau + wprobe
        a = square_wave_fundamental(f, koff + wp, koff)
        out = [(np.angle(a) - ph) / ps]
        if use_amp:
            out.append((scale * np.abs(a) - amp) / asg)
        return np.concatenate(out)

    p0 = [0.0]
    if wp_fixed is None:
        p0.append(math.log(0.3))
    if use_amp:
        p0.append(float(np.max(amp) / (2 / math.pi)))
    sol = optimize.least_squares(residuals, np.array(p0), method="lm", x_scale="jac")
    tau, wp, scale = unpack(sol.x)
    chi2 = float(np.sum(sol.fun**2))
    dof = n_data - n_par
    jac = sol.jac
    try:
        cov = np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.full((n_par, n_par), np.inf)
    if dof > 0 and chi2 / dof > 1:
        cov = cov * (chi2 / dof)
    sig = np.sqrt(np.abs(np.diag(cov)))
    # log parameters: sigma(x) = x sigma(log x)
    tau_sigma = tau * float(sig[0])
    j = 1
    wp_sigma = 0.0
    if wp_fixed is None:
        wp_sigma = wp * float(sig[1])
        j = 2
    scale_sigma = float(sig[j]) if use_amp else math.nan
    return LifetimeFit(
        tau=float(tau),
        tau_sigma=tau_sigma,
        pump_rate=float(wp),
        pump_rate_sigma=wp_sigma,
        ln_ratio_on=float(scale),
        ln_ratio_on_sigma=scale_sigma,
        chi2=chi2,
        dof=int(dof),
    )
