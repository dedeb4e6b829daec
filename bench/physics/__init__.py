"""Physics of gain media, SI units, no I/O, each formula citing its source.

The gain physics of a pumped quasi-three-level medium is split by topic: `saturation`
(photons, saturation, transparency, probe weakness), `gain` (ln R <-> inversion <-> gain and
its units), `gain_spectrum` (cross-sections from a probe-wavelength scan, McCumber reciprocity), `cross_section_relations` (McCumber, Füchtbauer-Ladenburg), `frantz_nodvik`
(pulsed probes), `heating` (ln R of a sample the pump warms, back at its baseline's temperature), `rate_equations` (the pumped manifold) and `lockin_response` (the
response to a square-wave pump at its modulation frequency) with `lockin_analysis` (ln R and
the lifetime from lock-in readings); `constants` holds h, c and k_B, and
`arguments` the checks they share. Besides them: `fitting` (models fitted to data), `spectra`
(cross-section spectrum files) and `beam` (beam profiles).

Everything in the formula modules is a pure function of numbers: floats or numpy arrays in,
``numpy.float64`` or arrays out (arrays broadcast against each other). Units are SI throughout:
m, m², m⁻³, s, W/m², J/m², K, J. The model is the two-manifold quasi-three-level medium with an
emission cross-section ``sigma_e`` and an absorption cross-section ``sigma_a`` at each
wavelength; a four-level medium is the case ``sigma_a = 0`` at the signal.

Words used: ``ln_ratio`` is ln R, R the pumped over unpumped normalised probe transmission;
``n2`` the (length-averaged) excited density; ``n_total`` the dopant density; ``beta`` the
excited fraction N2 / N_total; a *flux* is photons per m² per s.

Measured quantities (``ln_ratio``, ``n2`` estimated from noisy data) may be of either sign and
are only required to be finite; physical parameters (wavelengths, cross-sections, lengths,
lifetimes, densities) are checked and a ``ValueError`` names the argument that is wrong.

Every public formula is importable from `bench.physics` itself (scripts do so).
"""

from bench.physics.beam import gaussian_peak
from bench.physics.constants import (
    K_B,
    C,
    H,
)
from bench.physics.cross_section_relations import (
    fuchtbauer_ladenburg,
    mccumber_absorption,
    mccumber_emission,
)
from bench.physics.frantz_nodvik import (
    frantz_nodvik_correction,
    frantz_nodvik_output,
    frantz_nodvik_small_signal_gain,
)
from bench.physics.gain import (
    excited_density_from_ln_ratio,
    fresnel_reflectance,
    full_inversion_gain,
    gain_coefficient,
    gain_db,
    ln_gain_to_db,
    ln_ratio_from_excited_density,
    net_gain,
    per_m_to_db_per_cm,
    per_m_to_per_cm,
    unpumped_transmission,
)
from bench.physics.gain_spectrum import (
    absorption_from_transmission,
    emission_from_ln_ratio,
    empty_beam_ln_level,
    gain_cross_section,
    mccumber_reciprocity,
)
from bench.physics.heating import ln_ratio_at_baseline_temperature, ln_ratio_of_a_warm_modulated_sample
from bench.physics.lockin_analysis import (
    LockinLifetimeFit,
    fit_lifetime_from_lockin,
    ln_ratio_from_lockin_ratio,
    lockin_ratio,
    rc_noise_bandwidth,
)
from bench.physics.lockin_response import (
    LifetimeFit,
    first_order_fundamental,
    fit_lifetime_from_phase,
    ln_ratio_from_lockin,
    lockin_reading,
    rc_settle_time,
    square_wave_edges,
    square_wave_fundamental,
    square_wave_mean,
    square_wave_state,
)
from bench.physics.rate_equations import (
    beta_of_pump,
    probe_held_fraction,
    pump_rate,
    pump_saturation_parameters,
    rate_equation_step,
    steady_state_fraction,
    transparency_pump_intensity,
)
from bench.physics.saturation import (
    photon_energy,
    photon_flux,
    probe_weakness,
    saturation_fluence,
    saturation_intensity,
    transparency_fraction,
)

__all__ = [
    "LockinLifetimeFit",
    "fit_lifetime_from_lockin",
    "ln_ratio_from_lockin_ratio",
    "lockin_ratio",
    "rc_noise_bandwidth",
    "first_order_fundamental",
    "fit_lifetime_from_phase",
    "LifetimeFit",
    "ln_ratio_from_lockin",
    "lockin_reading",
    "rc_settle_time",
    "square_wave_edges",
    "square_wave_fundamental",
    "square_wave_mean",
    "square_wave_state",
    "C",
    "H",
    "K_B",
    "beta_of_pump",
    "excited_density_from_ln_ratio",
    "ln_ratio_at_baseline_temperature",
    "ln_ratio_of_a_warm_modulated_sample",
    "frantz_nodvik_correction",
    "frantz_nodvik_output",
    "frantz_nodvik_small_signal_gain",
    "fresnel_reflectance",
    "absorption_from_transmission",
    "emission_from_ln_ratio",
    "empty_beam_ln_level",
    "gain_cross_section",
    "mccumber_reciprocity",
    "fuchtbauer_ladenburg",
    "full_inversion_gain",
    "gaussian_peak",
    "gain_coefficient",
    "gain_db",
    "ln_gain_to_db",
    "ln_ratio_from_excited_density",
    "mccumber_absorption",
    "mccumber_emission",
    "net_gain",
    "per_m_to_db_per_cm",
    "per_m_to_per_cm",
    "photon_energy",
    "photon_flux",
    "probe_held_fraction",
    "probe_weakness",
    "pump_rate",
    "pump_saturation_parameters",
    "rate_equation_step",
    "saturation_fluence",
    "saturation_intensity",
    "steady_state_fraction",
    "transparency_fraction",
    "transparency_pump_intensity",
    "unpumped_transmission",
]
