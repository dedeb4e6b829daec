"""An independent reference for McCumber tests: two Stark-split manifolds in thermal equilibrium.

Each manifold's levels are populated by the Boltzmann law; a transition from lower level i to
upper level j absorbs with strength ``p_i S_ij`` and emits with ``p_j S_ij`` (same line
strength both ways: equal Einstein B coefficients for non-degenerate levels), at the photon
energy ``E_zl + E_j - E_i``. So, line by line,
``sigma_e / sigma_a = p_j / p_i = (Z_l / Z_u) exp((E_zl - h nu) / kT)``, the detailed-balance
result from which McCumber derived his relation, D. E. McCumber, Phys. Rev. 136, A954 (1964),
with the "net free energy" ``epsilon = E_zl + kT ln(Z_l / Z_u)``.

Nothing here calls the project's McCumber code: the populations and partition functions are
summed level by level. Lines are narrow Gaussians and the spectra are sampled at the line
centres, far enough apart that neighbouring lines add nothing measurable there
(`min_separation` reports how far apart they are).

The level energies are invented, of the magnitude of a Yb3+ ion in a garnet (a lower manifold
spread over about 800 cm^-1, an upper one over about 400 cm^-1, zero line near 970 nm).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import constants

#: One wavenumber (cm^-1) as an energy, J (scipy.constants, CODATA).
WAVENUMBER = constants.h * constants.c * 100.0

LOWER_CM = (0.0, 560.0, 615.0, 790.0)  # invented, cm^-1 above the lowest lower level
UPPER_CM = (0.0, 290.0, 355.0)  # invented, cm^-1 above the lowest upper level
ZERO_LINE_CM = 10320.0  # invented: lowest lower -> lowest upper level, about 969 nm
#: Invented line strengths S_ij (rows: lower level i, columns: upper level j), m^2.
STRENGTH = (
    np.array(
        [
            [1.0, 0.6, 0.3],
            [0.5, 0.8, 0.4],
            [0.7, 0.2, 0.9],
            [0.3, 0.5, 0.6],
        ]
    )
    * 1e-24
)


@dataclass(frozen=True)
class StarkSpectra:
    wavelength: np.ndarray  # m, sorted increasing, one per line
    sigma_a: np.ndarray  # m^2
    sigma_e: np.ndarray  # m^2
    epsilon: float  # J, E_zl + kT ln(Z_l / Z_u)
    temperature: float  # K
    min_separation: float  # smallest distance between two line centres, in line widths (sigma)


def spectra(
    temperature: float,
    *,
    lower_cm=LOWER_CM,
    upper_cm=UPPER_CM,
    zero_line_cm: float = ZERO_LINE_CM,
    strength=STRENGTH,
    width_cm: float = 0.2,
) -> StarkSpectra:
    """Absorption and emission cross-sections at every line centre, at ``temperature``."""
    kt = constants.k * temperature
    lower = np.asarray(lower_cm, dtype=float) * WAVENUMBER
    upper = np.asarray(upper_cm, dtype=float) * WAVENUMBER
    p_lower = np.exp(-lower / kt)
    z_lower = p_lower.sum()
    p_lower = p_lower / z_lower
    p_upper = np.exp(-upper / kt)
    z_upper = p_upper.sum()
    p_upper = p_upper / z_upper
    e_zl = zero_line_cm * WAVENUMBER
    energy = e_zl + upper[None, :] - lower[:, None]  # photon energy of line (i, j), J
    width = width_cm * WAVENUMBER
    centres = energy.ravel()
    s = np.asarray(strength, dtype=float)
    a_weight = (p_lower[:, None] * s).ravel()
    e_weight = (p_upper[None, :] * s).ravel()

    def band(weights, at):
        shape = np.exp(-0.5 * ((at[:, None] - centres[None, :]) / width) ** 2)
        return shape @ weights

    order = np.argsort(-centres)  # increasing wavelength
    at = centres[order]
    separations = np.diff(np.sort(centres)) / width
    return StarkSpectra(
        wavelength=constants.h * constants.c / at,
        sigma_a=band(a_weight, at),
        sigma_e=band(e_weight, at),
        epsilon=float(e_zl + kt * np.log(z_lower / z_upper)),
        temperature=float(temperature),
        min_separation=float(separations.min()),
    )
