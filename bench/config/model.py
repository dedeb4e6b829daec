"""A bench file's content as frozen dataclasses of SI floats (built by `bench.config.sections`)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

#: The roles an instrument may have on a bench.
ROLES = ("detector", "pump", "shutter", "wavelength")


@dataclass(frozen=True)
class CrossSections:
    """Cross-sections at the probe and pump wavelengths, m²."""

    probe_emission: float
    probe_absorption: float
    pump_absorption: float
    pump_emission: float


@dataclass(frozen=True)
class SampleUncertainty:
    """Standard uncertainties of the sample's parameters (systematic part of every estimate)."""

    length: float  # m, absolute
    n_total: float  # relative
    cross_sections: float  # relative, applied to each cross-section
    upper_state_lifetime: float  # relative
    temperature_dependence: float = 0.0  # relative, of each temperature coefficient


@dataclass(frozen=True)
class SampleConfig:
    label: str
    sample_id: str
    length: float  # m
    n_total: float  # m^-3
    upper_state_lifetime: float  # s
    temperature: float  # K
    refractive_index: float
    sigma: CrossSections
    uncertainty: SampleUncertainty
    spectrum_file: Path | None = None
    zero_line: float | None = None  # m, wavelength of the zero-phonon (McCumber) energy
    #: Relative change per kelvin of the probe's cross-sections (1/K), which hold at the
    #: baseline's temperature: sigma(T) = sigma (1 + k (T - T_baseline)). Zero: no correction.
    probe_absorption_per_kelvin: float = 0.0
    probe_emission_per_kelvin: float = 0.0


@dataclass(frozen=True)
class ProbeConfig:
    wavelength: float  # m
    power: float  # W
    beam_diameter: float  # m, 1/e² diameter
    kind: str  # "cw" or "pulsed"
    pulse_energy: float | None  # J, pulsed probes only
    weak_fraction: float  # flag the probe when I_probe / I_sat exceeds this


@dataclass(frozen=True)
class PumpConfig:
    wavelength: float  # m
    max_current: float  # A, what the tool will ever set
    diode_current_rating: float  # A, the diode's rating (datasheet)
    threshold_current: float  # A
    slope_efficiency: float  # W/A
    beam_diameter: float  # m, 1/e² diameter at the sample
    #: Pulsed pumping (pulsed mode): each pulse's width and the period of the pulses, s; both
    #: or neither (None: the bench file gives no pulse setting).
    pulse_width: float | None = None
    pulse_period: float | None = None

    def power_at(self, current: float) -> float:
        """Optical pump power (W) from the linear current-to-power calibration."""
        return max(0.0, self.slope_efficiency * (current - self.threshold_current))

    @property
    def max_power(self) -> float:
        return self.power_at(self.max_current)


@dataclass(frozen=True)
class InstrumentConfig:
    role: str
    driver: str
    resource: str  # VISA resource string, serial port or URL, or "simulated"
    profile: str  # built-in profile name or a path
    timeout: float  # s
    options: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class GuardConfig:
    max_current: float  # A
    current_tolerance: float  # A, |measured - setpoint| allowed once settled
    mount_temperature_min: float  # K
    mount_temperature_max: float  # K
    full_scale_fraction: float  # trip at this fraction of the detector range
    stale_after: float  # s without fresh readings
    comm_failures: int  # consecutive failed exchanges before a trip
    transmission_jump: float | None  # relative sudden change of S that trips; None = off


@dataclass(frozen=True)
class RunConfig:
    log_dir: Path
    flush_interval: float  # s
    operator: str
    estimate_every: float = 0.25  # s, length of one window estimate


@dataclass(frozen=True)
class SimulationConfig:
    seed: int
    slices: int
    model_step: float  # s
    probe_signal: float  # V at the probe detector, unpumped, before dark
    reference_signal: float  # V
    relative_intensity_noise: float  # relative, per sample, common to probe and reference
    detector_noise: float  # V rms per sample
    dark_probe: float  # V
    dark_reference: float  # V
    drift_per_hour: float  # relative slow drift of the probe source
    adc_bits: int
    pump_monitor_per_watt: float  # V/W
    ambient_temperature: float  # K
    mount_heating: float  # K/A at steady state
    thermal_time_constant: float  # s
    fluorescence_on_probe: float = 0.0  # W on the probe detector at full inversion (proportional to N2)
    sample_heating: float = 0.0  # K per W of absorbed pump, at steady state (0: the sample does not heat)
    sample_thermal_time_constant: float = 5.0  # s


@dataclass(frozen=True)
class BenchConfig:
    source: str  # the file it came from, or "<built-in demo bench>"
    text: str  # the TOML text as read (stored in every run as its snapshot)
    name: str
    simulated: bool
    sample: SampleConfig
    probe: ProbeConfig
    pump: PumpConfig
    instruments: Mapping[str, InstrumentConfig]
    guard: GuardConfig
    run: RunConfig
    simulation: SimulationConfig | None
    #: Values given apart from the file (``--set``), applied over ``text``.
    overrides: Mapping[str, str] = field(default_factory=dict)
    #: The folder relative file names in ``text`` were read from (spectrum files).
    base_dir: Path | None = None
    #: ``[bench] visa_library``: the VISA library (pyvisa's specification, a path in it made
    #: absolute) every VISA instrument opens through; "@py" (pyvisa-py) by default.
    visa_library: str = "@py"

    def visa_library_for(self, role: str) -> str:
        """The VISA library the instrument of ``role`` opens through: the bench's, or the
        instrument's own ``visa_backend`` option when the bench names none."""
        own = self.instruments[role].options.get("visa_backend")
        return str(own) if own is not None else self.visa_library
