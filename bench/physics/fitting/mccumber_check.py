"""McCumber consistency of a measured gain spectrum with the cross-sections of the bench file."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from bench import physics
from bench.physics.fitting.result import checked_xy


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
        return {
            k: (bool(v) if isinstance(v, (bool, np.bool_)) else (int(v) if k == "dof" else float(v)))
            for k, v in self.__dict__.items()
        }


def _scale_fit(y: np.ndarray, s: np.ndarray, shape: np.ndarray) -> tuple[float, float, float]:
    """Weighted least-squares ``y = k shape``: (k, sigma_k, chi2)."""
    w = 1.0 / s**2
    sxx = float(np.sum(w * shape * shape))
    if not sxx > 0:
        raise ValueError("sigma_a: the predicted shape is zero at every wavelength")
    k = float(np.sum(w * shape * y)) / sxx
    r = (y - k * shape) / s
    return k, 1.0 / math.sqrt(sxx), float(r @ r)


def mccumber_consistency(
    wavelength, ln_ratio, sigma, sigma_a, sigma_e, epsilon: float, temperature: float, *, p_min: float = 0.01
) -> McCumberCheck:
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
    lam, y, s = checked_xy(wavelength, ln_ratio, sigma, 2, "wavelength", "ln_ratio")
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
