"""Rate equations of the pumped manifold: pump rate, steady-state excited fraction, pump
saturation, transparency pump intensity and the exact step of the two-level equation.

Pure functions of numbers, SI units, vectorised over numpy arrays; see `bench.physics` for the
conventions and the words used.
"""

from __future__ import annotations

import math

import numpy as np

from bench.physics.arguments import (
    as_result,
    check_cross_sections,
    check_nonnegative,
    check_positive,
    checked_photon_energy,
)


def pump_rate(pump_intensity, pump_wavelength, sigma_a_pump):
    """Absorption rate per ground-state ion, ``sigma_a I / (h nu)``, in s⁻¹.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.3.
    """
    sa = check_nonnegative(sigma_a_pump, "sigma_a_pump", " (a cross-section)")
    ip = check_nonnegative(pump_intensity, "pump_intensity", " (an intensity)")
    return as_result(sa * ip / checked_photon_energy(pump_wavelength, "pump_wavelength"))


def _rates(pump_flux, sigma_ap, sigma_ep, tau, probe_flux, sigma_as, sigma_es):
    """(up-rate per ground ion A, total relaxation rate k) of dN2/dt = A N_total - k N2."""
    fp = check_nonnegative(pump_flux, "pump_flux", " (a photon flux)")
    fs = check_nonnegative(probe_flux, "probe_flux", " (a photon flux)")
    sap = check_nonnegative(sigma_ap, "sigma_ap", " (a cross-section)")
    sep = check_nonnegative(sigma_ep, "sigma_ep", " (a cross-section)")
    sas = check_nonnegative(sigma_as, "sigma_as", " (a cross-section)")
    ses = check_nonnegative(sigma_es, "sigma_es", " (a cross-section)")
    t = check_positive(tau, "tau", " (a lifetime)")
    up = sap * fp + sas * fs
    k = (sap + sep) * fp + (sas + ses) * fs + 1.0 / t
    return up, k


def steady_state_fraction(
    pump_intensity,
    pump_wavelength,
    sigma_a_pump,
    sigma_e_pump,
    tau,
    *,
    probe_intensity=0.0,
    probe_wavelength=None,
    sigma_e_probe=0.0,
    sigma_a_probe=0.0,
):
    """Steady-state excited fraction ``beta = N2 / N_total`` under CW pump (and probe).

    From ``dN2/dt = (sigma_ap N1 - sigma_ep N2) Phi_p + (sigma_as N1 - sigma_es N2) Phi_s
    - N2 / tau`` with ``N1 = N_total - N2`` and ``Phi = I / (h nu)``:
    ``beta = (sigma_ap Phi_p + sigma_as Phi_s) / ((sigma_ap + sigma_ep) Phi_p
    + (sigma_as + sigma_es) Phi_s + 1 / tau)``.

    Parameters
    ----------
    pump_intensity : float or array_like
        Pump intensity in W/m².
    pump_wavelength : float or array_like
        Pump wavelength in m.
    sigma_a_pump, sigma_e_pump : float or array_like
        Absorption and emission cross-sections at the pump, m².
    tau : float or array_like
        Upper-state lifetime in s.
    probe_intensity, probe_wavelength, sigma_e_probe, sigma_a_probe : optional
        The probe's intensity (W/m²), wavelength (m; needed when the probe intensity is not
        zero) and cross-sections (m²). The default is a probe too weak to matter.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    .. [2] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 7.3.
    """
    phi_p = check_nonnegative(pump_intensity, "pump_intensity", " (an intensity)") / checked_photon_energy(
        pump_wavelength, "pump_wavelength"
    )
    ip = check_nonnegative(probe_intensity, "probe_intensity", " (an intensity)")
    if probe_wavelength is None:
        if np.any(ip > 0):
            raise ValueError("probe_wavelength: needed when probe_intensity is not zero")
        phi_s = np.zeros_like(ip)
    else:
        phi_s = ip / checked_photon_energy(probe_wavelength, "probe_wavelength")
    up, k = _rates(phi_p, sigma_a_pump, sigma_e_pump, tau, phi_s, sigma_a_probe, sigma_e_probe)
    return as_result(up / k)


def probe_held_fraction(probe_flux, sigma_e, sigma_a, tau):
    """Excited fraction a CW probe alone keeps up (no pump): the unpumped reference state.

    The two-level steady state under the probe's own stimulated rates (absorption
    ``sigma_a Phi_s`` up, emission ``sigma_e Phi_s`` and decay ``1 / tau`` down):
    ``beta_off = sigma_a Phi_s / ((sigma_a + sigma_e) Phi_s + 1 / tau)``. A baseline taken with
    the pump off already holds this much excitation, so ln R measures the *change* from it.

    Parameters
    ----------
    probe_flux : float or array_like
        Probe photon flux, photons m⁻² s⁻¹ (weighted by the probe's own profile).
    sigma_e, sigma_a : float or array_like
        Cross-sections at the probe, m².
    tau : float or array_like
        Upper-state lifetime, s.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (rate equations
       of a quasi-three-level medium; here with the pump rate zero).
    """
    up, k = _rates(0.0, 0.0, 0.0, tau, probe_flux, sigma_a, sigma_e)
    return as_result(up / k)


def pump_saturation_parameters(pump_wavelength, sigma_a_pump, sigma_e_pump, tau):
    """``(beta_max, i_sat_pump)`` of the saturation form `beta_of_pump` (weak probe).

    ``beta_max = sigma_ap / (sigma_ap + sigma_ep)`` (the most a pump at this wavelength can
    excite) and ``i_sat_pump = h nu_p / ((sigma_ap + sigma_ep) tau)`` in W/m², so that
    ``steady_state_fraction(I) == beta_of_pump(I, beta_max, i_sat_pump)``.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    _, sap, total = check_cross_sections(sigma_e_pump, sigma_a_pump, "sigma_e_pump", "sigma_a_pump")
    t = check_positive(tau, "tau", " (a lifetime)")
    return as_result(sap / total), as_result(
        checked_photon_energy(pump_wavelength, "pump_wavelength") / (total * t)
    )


def beta_of_pump(p, beta_max, p_sat):
    """The saturation form ``beta_max (p / p_sat) / (1 + p / p_sat)`` used to fit pump sweeps.

    ``p`` may be a pump intensity, power or current above threshold, as long as ``p_sat`` is in
    the same unit. A fitter should bound ``p_sat > 0`` and ``0 <= beta_max <= 1``
    (scipy.optimize.curve_fit with ``bounds``), since values outside raise ValueError.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    pp = check_nonnegative(p, "p")
    bm = check_nonnegative(beta_max, "beta_max")
    if np.any(bm > 1):
        raise ValueError(f"beta_max: must be at most 1, got {float(np.max(bm))!r}")
    ps = check_positive(p_sat, "p_sat")
    s = pp / ps
    return as_result(bm * s / (1.0 + s))


def transparency_pump_intensity(pump_wavelength, sigma_ap, sigma_ep, tau, beta_target):
    """Pump intensity (W/m²) whose steady state is ``beta = beta_target``; ``inf`` if none.

    Inverts `beta_of_pump`: ``I = i_sat_pump beta_t / (beta_max - beta_t)``. Used with
    ``beta_target = transparency_fraction(...)`` at the probe for the pump needed for
    transparency. A target at or beyond ``beta_max`` of the pump cannot be reached at any
    intensity and gives ``math.inf`` (not an error); ``beta_target = 0`` gives 0.

    Parameters
    ----------
    pump_wavelength : float or array_like
        Pump wavelength in m.
    sigma_ap, sigma_ep : float or array_like
        Absorption and emission cross-sections at the pump, m².
    tau : float or array_like
        Upper-state lifetime in s.
    beta_target : float or array_like
        Excited fraction wanted, in [0, 1].

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    """
    beta_max, i_sat = pump_saturation_parameters(pump_wavelength, sigma_ap, sigma_ep, tau)
    bt = check_nonnegative(beta_target, "beta_target", " (an excited fraction)")
    if np.any(bt > 1):
        raise ValueError(f"beta_target: must be at most 1, got {float(np.max(bt))!r}")
    with np.errstate(divide="ignore", invalid="ignore"):
        i = i_sat * bt / (beta_max - bt)
    return as_result(np.where(bt == 0, 0.0, np.where(bt >= beta_max, math.inf, i)))


def rate_equation_step(
    n2, n_total, pump_flux, sigma_ap, sigma_ep, tau, dt, *, probe_flux=0.0, sigma_as=0.0, sigma_es=0.0
):
    """Excited density after ``dt`` under constant fluxes: the exact solution of the rate equation.

    ``dN2/dt = A N_total - k N2`` with ``A = sigma_ap Phi_p + sigma_as Phi_s`` and
    ``k = (sigma_ap + sigma_ep) Phi_p + (sigma_as + sigma_es) Phi_s + 1 / tau`` is linear, so
    ``N2(dt) = N2ss + (N2 - N2ss) exp(-k dt)`` with ``N2ss = A N_total / k``. Exact for any
    step length; all arguments broadcast (e.g. one value per slice of the sample).

    Parameters
    ----------
    n2 : float or array_like
        Excited density now, m⁻³, in [0, n_total].
    n_total : float or array_like
        Dopant density, m⁻³.
    pump_flux : float or array_like
        Pump photon flux, photons m⁻² s⁻¹ (see `photon_flux`).
    sigma_ap, sigma_ep : float or array_like
        Cross-sections at the pump, m².
    tau : float or array_like
        Upper-state lifetime, s.
    dt : float or array_like
        Step length, s, zero or positive.
    probe_flux, sigma_as, sigma_es : float or array_like, optional
        Probe photon flux and cross-sections at the probe.

    References
    ----------
    .. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, ch. 6 (rate equations).
    """
    nt = check_nonnegative(n_total, "n_total", " (a density)")
    n = check_nonnegative(n2, "n2", " (a density)")
    if np.any(n > nt * (1.0 + 1e-9)):
        raise ValueError("n2: must not exceed n_total")
    step = check_nonnegative(dt, "dt", " (a time step)")
    up, k = _rates(pump_flux, sigma_ap, sigma_ep, tau, probe_flux, sigma_as, sigma_es)
    n_ss = up * nt / k
    return as_result(n + (n_ss - n) * -np.expm1(-k * step))
