"""Figures from one ln R: gain, inversion and their uncertainties, and the flags modes share.

Figures (`figures`). ``ln R`` is the pump-induced change from the baseline, which already
holds the excitation the probe alone keeps up, ``beta_off = sigma_a Phi_s / ((sigma_a +
sigma_e) Phi_s + 1/tau)`` (`probe_terms`; about 5e-5 on the demo bench). It is added back:
``beta`` (``N2 / N_total``) and ``n2_per_m3`` are absolute, and the gain figures are those of the
pumped sample, ``ln G = ln R + (sigma_e + sigma_a) L N beta_off - sigma_a N L = g L``. The
pump-induced change itself is in the watch estimates' and the sweep points' ``beta_change``
(with ``beta_probe_held``).

Uncertainty model (every figure is a `bench.records.Quantity`):

* ``sigma_noise``: the statistical part described in each mode's module, propagated linearly;
  the baseline's standard error is added in quadrature where the baseline is used. The dark's
  standard error is added in chopped and decay modes (`dark_noise`: it moves ln R by
  ``d_p (1 / S_off - 1 / S_on) / V_ref``, first order in ln R); elsewhere it is neglected.
* ``sigma_systematic``: from the configured standard uncertainties of the length ``L``
  (absolute), the density ``N`` (relative) and each cross-section (relative, ``u_sigma``,
  ``sigma_e`` and ``sigma_a`` independent), propagated linearly and assumed independent:
  for the pump-induced ``ln R / ((sigma_e + sigma_a) L N)`` of beta the relative part is
  ``sqrt(u_sum^2 + (u_L / L)^2 + u_N^2)`` with ``u_sum = u_sigma sqrt(sigma_e^2 + sigma_a^2)
  / (sigma_e + sigma_a)``; ``n2`` drops ``u_N``; ``ln G = ln R - sigma_a N L`` carries
  ``sigma_a N L sqrt(u_sigma^2 + u_N^2 + (u_L / L)^2)``; ``g = ln R / L - sigma_a N`` carries
  ``sqrt((ln R u_L / L^2)^2 + (sigma_a N)^2 (u_sigma^2 + u_N^2))``. ``ln_ratio`` is measured
  directly and has no configured systematic part; ``tau_s`` has only that of its correction for
  the probe's own stimulated rate, ``tau^2 (sigma_e + sigma_a) Phi_s u_sum`` (the probe power
  and beam size carry no configured uncertainty). ``beta_off`` adds a systematic part from the
  cross-sections and the lifetime's configured uncertainty ``u_tau`` (`_held_sys`).
* ``sigma``: the two parts in quadrature.

References
----------
.. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
   (quasi-three-level gain and inversion).
.. [2] JCGM 100:2008, *Evaluation of measurement data - Guide to the expression of uncertainty
   in measurement* (GUM), sec. 5.1 (linear propagation of uncorrelated uncertainties).
.. [3] L. M. Frantz and J. S. Nodvik, "Theory of pulse propagation in a laser amplifier",
   J. Appl. Phys. 34, 2346 (1963).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from bench import physics
from bench.estimator.capture import Dark
from bench.estimator.params import EstimatorParams
from bench.estimator.state import Counts, EstimatorState
from bench.records import Quantity

__all__ = [
    "figures",
    "probe_terms",
    "pump_induced",
    "pulsed_small_signal_ln_ratio",
    "quantity",
    "common_flags",
    "snr_flags",
    "wavelength_of",
    "dark_noise",
    "with_ln_ratio_systematic",
]


def quantity(value: float, noise: float, sys: float = 0.0) -> Quantity:
    return Quantity(float(value), float(math.hypot(noise, sys)), float(noise), float(sys))


_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(24)


def _beam_energy_gain(g0: float, f_peak: float, f_sat: float) -> float:
    """Energy gain of a Gaussian-profile pulse (peak fluence ``f_peak``) through a Frantz-Nodvik
    amplifier of small-signal gain ``g0``: the local fluence gain averaged over
    ``u = F / F_peak`` in (0, 1] (the Gaussian profile makes ``dE = (pi w^2 / 2) F_peak du``)."""
    u = 0.5 * (_GL_NODES + 1.0)
    f_in = f_peak * u
    f_out = physics.frantz_nodvik_output(f_in, f_sat, g0)
    return float(0.5 * np.sum(_GL_WEIGHTS * f_out / f_in))


def pulsed_small_signal_ln_ratio(
    ln_ratio: float, params: EstimatorParams, sigma_e: float, sigma_a: float, wavelength: float | None = None
) -> float:
    """Small-signal ln R from the ln R measured with a pulsed probe of the configured energy.

    Both the pumped and the unpumped transmission of a pulse follow Frantz-Nodvik; for a
    Gaussian beam the measured energy gain is the local gain averaged over the profile
    (`_beam_energy_gain`). The unpumped small-signal transmission ``T0 = exp(-sigma_a N L)``
    gives the measured unpumped energy transmission ``T_m``; the pumped energy gain is then
    ``R T_m``, which is inverted (Brent's method) for the pumped small-signal gain ``G0``, and
    ``ln R0 = ln G0 - ln T0``.

    References
    ----------
    .. [1] L. M. Frantz and J. S. Nodvik, J. Appl. Phys. 34, 2346 (1963).
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 10.3 (pulse
       amplification) and sec. 17.1 (Gaussian beam profile).
    """
    from scipy.optimize import brentq

    lam = params.probe_wavelength if wavelength is None else wavelength
    f_sat = float(physics.saturation_fluence(lam, sigma_e, sigma_a))
    f_peak = params.probe_peak
    if not f_peak > 0:
        return float(ln_ratio)
    ln_t0 = -sigma_a * params.n_total * params.length
    t_meas = _beam_energy_gain(math.exp(ln_t0), f_peak, f_sat)
    target = math.exp(ln_ratio) * t_meas

    def gap(ln_g0: float) -> float:
        return math.log(_beam_energy_gain(math.exp(ln_g0), f_peak, f_sat)) - math.log(target)

    lo, hi = -50.0, 50.0
    if gap(lo) > 0 or gap(hi) < 0:
        raise ValueError("ln_ratio: no small-signal gain reproduces this pulsed measurement")
    ln_g0 = brentq(gap, lo, hi, xtol=1e-13, rtol=1e-14)
    return float(ln_g0 - ln_t0)


def probe_terms(params: EstimatorParams, wavelength: float | None = None) -> tuple[float, float, float]:
    """(photon flux, stimulated rate, held fraction) of the probe alone, at ``wavelength``.

    The flux is the probe's photon flux weighted by its own Gaussian profile,
    ``P / (pi w^2) / (h nu)`` (half the on-axis value; the one definition gainbench uses for the
    probe's intensity, see `EstimatorParams.probe_saturation`); the stimulated rate
    ``W_s = (sigma_e + sigma_a) Phi_s`` is what it adds to the relaxation rate ``1/tau``; the
    held fraction ``beta_off`` (`bench.physics.probe_held_fraction`) is the excitation it keeps up
    with the pump off, which the baseline already holds. Pulsed probes: all zero (their mean
    stimulated rate is negligible); unknown cross-sections: zero as well.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (rate equations).
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 17.1 (Gaussian beams).
    """
    xs = params.cross_sections_at(wavelength)
    if params.probe_kind != "cw" or xs is None or not params.probe_peak > 0:
        return 0.0, 0.0, 0.0
    lam = params.probe_wavelength if wavelength is None else wavelength
    se, sa = xs
    flux = float(physics.photon_flux(params.probe_mean, lam))
    return flux, (se + sa) * flux, float(physics.probe_held_fraction(flux, se, sa, params.tau))


def _held_sys(params: EstimatorParams, wavelength: float | None, se: float, sa: float) -> float:
    """Standard uncertainty of ``beta_off`` from the configured ones of sigma_a, sigma_e and tau
    (linear propagation, GUM sec. 5.1): ``d ln beta_off`` is ``1 - sigma_a Phi / k`` per
    ``d ln sigma_a``, ``-sigma_e Phi / k`` per ``d ln sigma_e`` and ``1 / (tau k)`` per
    ``d ln tau``, with ``k = (sigma_a + sigma_e) Phi + 1/tau``."""
    flux, rate, b_off = probe_terms(params, wavelength)
    if b_off == 0.0:
        return 0.0
    k = rate + 1.0 / params.tau
    d_sa = 1.0 - sa * flux / k
    d_se = -se * flux / k
    d_tau = 1.0 / (params.tau * k)
    u = params.u_cross_sections
    return b_off * math.sqrt((d_sa * u) ** 2 + (d_se * u) ** 2 + (d_tau * params.u_tau) ** 2)


def figures(
    params: EstimatorParams, ln_ratio: float, sigma_noise: float, wavelength: float | None = None
) -> dict[str, Quantity]:
    """All figures from one ln R and its noise sigma (uncertainty model in the module doc).

    ``ln R`` measures the pump-induced change from the baseline, and the baseline already holds
    the excitation the probe alone keeps up, ``beta_off`` (`probe_terms`). It is added back, so
    ``n2_per_m3`` and ``beta`` are absolute (``beta = N2 / N_total``) and ``gain_coefficient``,
    ``gain_linear`` and ``gain_db`` are those of the pumped sample itself:
    ``<N2> = ln R / ((sigma_e + sigma_a) L) + beta_off N``, ``ln G = (sigma_e + sigma_a) L <N2>
    - sigma_a N L = g L``. ``beta_off`` carries no noise; its systematic part (`_held_sys`,
    from the configured uncertainties of the cross-sections and of the lifetime) is added in
    quadrature to the others. dB are computed from ``ln G`` directly (no overflow or underflow
    however thick the sample).

    ``wavelength`` selects the cross-sections (`EstimatorParams.cross_sections_at`); if none
    are known there only ``ln_ratio`` is returned. Pulsed probes are corrected with
    `pulsed_small_signal_ln_ratio` first (the noise is carried through its slope).
    """
    lnr, sn = float(ln_ratio), float(sigma_noise)
    xs = params.cross_sections_at(wavelength)
    if xs is None:
        return {"ln_ratio": quantity(lnr, sn)}
    se, sa = xs
    if params.probe_kind == "pulsed":
        h = max(1e-6, 1e-3 * abs(sn)) if math.isfinite(sn) else 1e-6
        lo = pulsed_small_signal_ln_ratio(lnr - h, params, se, sa, wavelength)
        hi = pulsed_small_signal_ln_ratio(lnr + h, params, se, sa, wavelength)
        slope = (hi - lo) / (2 * h)
        lnr = pulsed_small_signal_ln_ratio(lnr, params, se, sa, wavelength)
        sn = abs(slope) * sn
    L, N = params.length, params.n_total
    u_cs, u_n, u_l = params.u_cross_sections, params.u_n_total, params.u_length / L
    total = se + sa
    u_sum = u_cs * math.hypot(se, sa) / total
    _, _, b_off = probe_terms(params, wavelength)
    b_off_sys = _held_sys(params, wavelength, se, sa)
    n2_change = float(physics.excited_density_from_ln_ratio(lnr, se, sa, L))
    n2 = n2_change + b_off * N
    beta = n2 / N
    alpha0 = sa * N * L
    ln_held = total * L * b_off * N  # ln T of the baseline state over the unexcited sample
    ln_gain = lnr + ln_held - alpha0
    lng_sys = math.hypot(alpha0 * math.sqrt(u_cs**2 + u_n**2 + u_l**2), total * L * N * b_off_sys)
    gain = math.exp(ln_gain) if ln_gain < 700.0 else math.inf
    g = float(physics.gain_coefficient(n2, N, se, sa))
    g_sys = math.hypot(lnr * u_l / L, sa * N * math.hypot(u_cs, u_n), total * N * b_off_sys)
    db = 10.0 / math.log(10.0)
    return {
        "ln_ratio": quantity(lnr, sn),
        "gain_linear": quantity(gain, gain * sn, gain * lng_sys),
        "gain_db": quantity(float(physics.ln_gain_to_db(ln_gain)), db * sn, db * lng_sys),
        "gain_coefficient_per_cm": quantity(float(physics.per_m_to_per_cm(g)), sn / L / 100.0, g_sys / 100.0),
        "n2_per_m3": quantity(
            n2,
            sn / (total * L),
            math.hypot(abs(n2_change) * math.hypot(u_sum, u_l), N * b_off_sys, b_off * N * u_n),
        ),
        "beta": quantity(
            beta,
            sn / (total * L * N),
            math.hypot(abs(n2_change / N) * math.sqrt(u_sum**2 + u_l**2 + u_n**2), b_off_sys),
        ),
    }


def pump_induced(
    params: EstimatorParams, values: Mapping[str, Quantity], wavelength: float | None = None
) -> dict[str, float]:
    """The pump-induced change of the excited fraction behind `figures`' absolute ``beta``, and
    the probe-held part added back (for an estimate's ``extra``); empty without a ``beta``."""
    q = values.get("beta")
    if q is None:
        return {}
    b_off = probe_terms(params, wavelength)[2]
    return {"beta_change": q.value - b_off, "beta_probe_held": b_off}


def common_flags(
    state: EstimatorState, t: float, counts: Counts, wavelength: float | None, uses_baseline: bool
) -> set[str]:
    p = state.params
    flags: set[str] = set()
    sat = p.probe_saturation(wavelength)
    if sat is not None and sat > p.weak_fraction:
        flags.add("probe_not_weak")
    if counts.over:
        flags.add("near_full_scale")
    if state.dark is None:
        flags.add("no_dark")
    if uses_baseline:
        if state.baseline is None:
            flags.add("no_baseline")
        elif t - state.baseline.t > p.baseline_max_age:
            flags.add("baseline_stale")
    return flags


def snr_flags(values: Mapping[str, Quantity], p: EstimatorParams, n_items: int) -> set[str]:
    q = values.get("ln_ratio")
    if q is None:
        return set()
    if n_items < p.min_batches or not (abs(q.value) >= p.snr_min * q.sigma_noise):
        return {"low_snr"}
    return set()


def wavelength_of(state: EstimatorState) -> float | None:
    return state.settings.get("probe_wavelength")


def dark_noise(dark: Dark | None, ref_level: float, s_off: float, ln_ratio: float) -> float:
    """The dark's share of the noise of ln R: an error ``d`` of the probe dark moves ``ln S``
    by ``-d / (S V_ref)``, so ln R by ``d (1 / S_off - 1 / S_on) / V_ref`` (not second order:
    S_on and S_off differ by the factor R); the reference dark cancels in the ratio."""
    if dark is None or not (ref_level > 0 and s_off > 0 and math.isfinite(ln_ratio)):
        return 0.0
    s_on = s_off * math.exp(ln_ratio)
    return abs(dark.probe_sigma * (1.0 / s_off - 1.0 / s_on) / ref_level)


#: Above this fraction of the probe level the subtracted background raises ``background_high``.
BACKGROUND_FLAG_FRACTION = 0.01


def background_share(state: EstimatorState, s_on: float) -> tuple[float, float]:
    """(relative sigma of ``S_on`` from the background's own error, background / probe level).

    The background was subtracted from every pump-on probe sample, so an error ``d`` in it
    moves ``S_on`` by ``d / V_ref``: relative ``d / (S_on V_ref)``; one measurement, so it does
    not average down with the run. (0, 0) without a background or a reference level."""
    bg, base = state.background, state.baseline
    if (
        bg is None
        or base is None
        or not (math.isfinite(base.reference_v) and base.reference_v > 0 and s_on > 0)
    ):
        return 0.0, 0.0
    level = s_on * base.reference_v
    return bg.probe_sigma / level, bg.probe / level


def with_ln_ratio_systematic(values: dict[str, Quantity], sys: float) -> dict[str, Quantity]:
    """``values`` (from `figures`) with a systematic part ``sys`` of ln R propagated into every
    figure through its noise sensitivity to ln R (linear, GUM sec. 5.1), in quadrature."""
    q = values.get("ln_ratio")
    if q is None or not (sys > 0) or not q.sigma_noise > 0:
        return values
    out = {}
    for name, v in values.items():
        sens = v.sigma_noise / q.sigma_noise
        out[name] = quantity(v.value, v.sigma_noise, math.hypot(v.sigma_systematic, sens * sys))
    return out
