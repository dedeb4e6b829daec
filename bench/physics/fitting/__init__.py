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

from bench.physics.fitting.decay import exponential_decay, fit_exponential_decay
from bench.physics.fitting.mccumber_check import McCumberCheck, mccumber_consistency
from bench.physics.fitting.pump_saturation import fit_saturation, thick_sample_fraction
from bench.physics.fitting.result import FitResult
from bench.physics.fitting.voigt import fit_voigt, voigt_fwhm, voigt_line

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
