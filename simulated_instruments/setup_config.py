"""What the simulator reads of a bench file, and the error it raises when that will not do.

The simulator takes the application's parsed bench file as it is, but knows it only through
these protocols: the fields listed here are all it reads (values in SI units, as the bench
file's reader gives them), so that any object with them will do, and the simulator imports
nothing from the application.

A setup the simulator cannot run (no ``[simulation]`` table, a bad fault spec, a fault for an
instrument the bench has not got, a detector option that is not a quantity) raises
`SimulatorSetupError`, whose message names the file, key or spec and what was expected; the
application turns it into its own configuration error.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Protocol


class SimulatorSetupError(ValueError):
    """The simulator cannot be set up as asked; the message says what is wrong and where."""


class CrossSectionsSetup(Protocol):
    """The sample's cross-sections (m²)."""

    probe_emission: float
    probe_absorption: float
    pump_absorption: float
    pump_emission: float


class SampleSetup(Protocol):
    """The gain medium."""

    length: float  # m
    n_total: float  # m^-3
    upper_state_lifetime: float  # s
    sigma: CrossSectionsSetup
    probe_absorption_per_kelvin: float  # relative change of the probe's sigma_a per K
    probe_emission_per_kelvin: float  # relative change of the probe's sigma_e per K


class ProbeSetup(Protocol):
    """The probe beam."""

    wavelength: float  # m
    power: float  # W
    beam_diameter: float  # m


class PumpSetup(Protocol):
    """The pump diode and its beam."""

    wavelength: float  # m
    diode_current_rating: float  # A
    threshold_current: float  # A
    slope_efficiency: float  # W/A
    beam_diameter: float  # m


class InstrumentSetup(Protocol):
    """One instrument entry: the simulator reads the detector's ``sample_rate`` and ``range``,
    and its ``driver`` (which simulated detector to serve: ``"meter"`` a polled meter, ``"lockin"``
    a lock-in amplifier, otherwise the digitiser)."""

    driver: str
    options: Mapping[str, Any]
    driver: str


class SimulationSetup(Protocol):
    """The ``[simulation]`` table: noise, drift, thermal behaviour, model resolution."""

    seed: int
    slices: int
    model_step: float  # s
    probe_signal: float  # V
    reference_signal: float  # V
    relative_intensity_noise: float
    detector_noise: float  # V rms per sample
    dark_probe: float  # V
    dark_reference: float  # V
    drift_per_hour: float
    adc_bits: int
    pump_monitor_per_watt: float  # V/W
    ambient_temperature: float  # K
    mount_heating: float  # K/A
    thermal_time_constant: float  # s
    fluorescence_on_probe: float  # W of the medium's fluorescence on the probe detector at full inversion
    sample_heating: float  # K per W of absorbed pump at steady state (0: no heating)
    sample_thermal_time_constant: float  # s


class BenchSetup(Protocol):
    """A parsed bench file, as far as the simulator reads it."""

    source: str  # the file it came from, named in errors
    sample: SampleSetup
    probe: ProbeSetup
    pump: PumpSetup
    instruments: Mapping[str, InstrumentSetup]  # role -> entry; the roles to serve
    simulation: SimulationSetup | None
