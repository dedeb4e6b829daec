"""The result of a fit, and the input checks and covariance handling the fits share."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


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


def checked_xy(x, y, sigma, min_points: int, x_name: str = "x", y_name: str = "y"):
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


def fit_result(names, popt, pcov, chi2, dof) -> FitResult:
    pcov = np.asarray(pcov, dtype=np.float64)
    if not np.all(np.isfinite(pcov)):
        pcov = np.full_like(pcov, math.nan) if pcov.size else pcov
    sig = np.sqrt(np.clip(np.diag(pcov), 0.0, None)) if pcov.size else np.array([])
    return FitResult(tuple(names), np.asarray(popt, dtype=np.float64), sig, pcov, float(chi2), int(dof))


def inflate_covariance(pcov: np.ndarray, chi2: float, dof: int) -> np.ndarray:
    """PDG scale factor: multiply the covariance by chi2/dof when that exceeds 1."""
    if dof > 0 and chi2 / dof > 1.0:
        return pcov * (chi2 / dof)
    return pcov
