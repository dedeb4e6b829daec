"""Sample heating: the probe ratio of a sample warmer when pumped than at its baseline.

The probe's cross-sections change with temperature (in a quasi-three-level medium the
absorption at the signal rises as the lower laser level, a thermally populated Stark level,
fills: about 1 %/K for Yb at 1030 nm near room temperature). A sample that the pump heats by
``dT`` then changes its probe transmission for a reason that is not the inversion, and ln R
read as if the cross-sections were those of the baseline's temperature gives a wrong N2.

With Beer-Lambert for the two-manifold medium (Svelto, *Principles of Lasers*, 5th ed.,
sec. 2.4 and 9.2.2), ``ln T = (sigma_e + sigma_a) L N2 - sigma_a N L``. At the baseline
(temperature ``T0``, excited density ``N2_off``) and pumped (``T0 + dT``, ``N2``), with
``sigma(T0 + dT) = sigma (1 + k dT)`` for each cross-section (linear in ``dT``, a first-order
model of the coefficients the bench file states),

    ln R = (sigma_e1 + sigma_a1) L N2 - sigma_a1 N L - (sigma_e + sigma_a) L N2_off + sigma_a N L,

so ``N2 = (ln R + (sigma_a1 - sigma_a) N L + (sigma_e + sigma_a) L N2_off) / ((sigma_e1 +
sigma_a1) L)``. The ratio the sample would have shown at the baseline's temperature is
``ln R0 = (sigma_e + sigma_a) L (N2 - N2_off)``: every figure that follows from ln R (inversion,
excited fraction) is then right when computed from ``ln R0`` with the baseline's
cross-sections.

Pure functions of numbers, SI units, vectorised over numpy arrays.
"""

from __future__ import annotations

import numpy as np

from bench.physics.arguments import (
    as_result,
    check_cross_sections,
    check_nonnegative,
    check_positive,
    check_real,
)


def ln_ratio_at_baseline_temperature(
    ln_ratio,
    delta_t,
    sigma_e,
    sigma_a,
    n_total,
    length,
    n2_off,
    sigma_e_per_kelvin,
    sigma_a_per_kelvin,
):
    """ln R0: the ln R the sample would show at its baseline's temperature (module doc).

    Parameters
    ----------
    ln_ratio : measured ln R, the pumped sample ``delta_t`` (K) warmer than at its baseline.
    sigma_e, sigma_a : probe cross-sections at the baseline's temperature, m².
    n_total : dopant density, m⁻³; ``length`` the sample's length, m.
    n2_off : excited density of the baseline (the probe's own), m⁻³.
    sigma_e_per_kelvin, sigma_a_per_kelvin : relative change of each cross-section per kelvin.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, sec. 2.4 (Beer-Lambert
       absorption and gain) and sec. 9.2.2 (quasi-three-level media).
    """
    lnr = check_real(ln_ratio, "ln_ratio")
    dt = check_real(delta_t, "delta_t")
    se, sa, _ = check_cross_sections(sigma_e, sigma_a)
    n = check_positive(n_total, "n_total")
    length = check_positive(length, "length")
    n2_off = check_nonnegative(n2_off, "n2_off")
    ke = check_real(sigma_e_per_kelvin, "sigma_e_per_kelvin")
    ka = check_real(sigma_a_per_kelvin, "sigma_a_per_kelvin")
    se1 = se * (1.0 + ke * dt)
    sa1 = sa * (1.0 + ka * dt)
    if np.any(se1 + sa1 <= 0):
        raise ValueError("delta_t: the cross-sections would not be positive that far from the baseline")
    n2 = (lnr + (sa1 - sa) * n * length + (se + sa) * length * n2_off) / ((se1 + sa1) * length)
    return as_result((se + sa) * length * (n2 - n2_off))


def ln_ratio_of_a_warm_modulated_sample(
    ln_ratio, delta_t, sigma_e, sigma_a, sigma_e_per_kelvin, sigma_a_per_kelvin
):
    """ln R0 of a sample whose pump-on and pump-off states are both ``delta_t`` (K) warmer than
    its baseline: a pump modulated much faster than the sample's thermal time, as in chopped or
    lock-in detection, heats the sample to its mean power in both half-periods.

    Both states then share the warm cross-sections, the ``sigma_a N L`` terms cancel and
    ``ln R = (sigma_e1 + sigma_a1) L (N2 - N2_off)`` (Beer-Lambert for two manifolds, Svelto,
    *Principles of Lasers*, 5th ed., sec. 2.4); at the baseline's cross-sections the same
    inversion gives ``ln R0 = ln R (sigma_e + sigma_a) / (sigma_e1 + sigma_a1)``. The probe's
    own share of ``N2_off`` is taken as unchanged by the temperature (second order for a weak
    probe).
    """
    lnr = check_real(ln_ratio, "ln_ratio")
    dt = check_real(delta_t, "delta_t")
    se, sa, total = check_cross_sections(sigma_e, sigma_a)
    ke = check_real(sigma_e_per_kelvin, "sigma_e_per_kelvin")
    ka = check_real(sigma_a_per_kelvin, "sigma_a_per_kelvin")
    warm = se * (1.0 + ke * dt) + sa * (1.0 + ka * dt)
    if np.any(warm <= 0):
        raise ValueError("delta_t: the cross-sections would not be positive that far from the baseline")
    return as_result(lnr * total / warm)
