"""Building a `BenchConfig` from a bench file's tables, one function per table, each value
checked against its bounds (`bench.config.limits`)."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace
from pathlib import Path
from typing import Any

from bench.config.limits import (
    BEAM_DIAMETER_RANGE,
    COMM_FAILURES_MAX,
    CROSS_SECTION_MAX,
    CURRENT_TOLERANCE_MAX_FRACTION,
    LENGTH_RANGE,
    LIFETIME_RANGE,
    MOUNT_TEMPERATURE_RANGE,
    N_TOTAL_MAX,
    OPTICAL_DEPTH_MAX,
    PROBE_POWER_MAX,
    PUMP_CURRENT_MAX,
    SLOPE_EFFICIENCY_MAX,
    STALE_AFTER_MAX,
    TEMPERATURE_COEFFICIENT_MAX,
    TRANSMISSION_JUMP_MAX,
)
from bench.config.model import (
    ROLES,
    BenchConfig,
    CrossSections,
    GuardConfig,
    InstrumentConfig,
    ProbeConfig,
    PumpConfig,
    RunConfig,
    SampleConfig,
    SampleUncertainty,
    SimulationConfig,
)
from bench.config.toml_reader import BenchFileReader
from bench.config.visa_library import KEY as VISA_LIBRARY_KEY
from bench.config.visa_library import read_visa_library
from bench.errors import ConfigError
from bench.physics import photon_energy, spectra


def _refuse_simulator_on_a_real_bench(
    r: BenchFileReader, simulated: bool, instruments: Mapping[str, Any]
) -> None:
    """A bench that is not simulated must not name the simulator: its data would be stored as
    real (no simulation banner, tag or ground truth)."""
    if simulated:
        return
    for role, inst in instruments.items():
        if inst.resource == "simulated":
            raise r.fail(
                f"instruments.{role}.resource",
                '"simulated" is the simulated bench, but bench.simulated is false (the run would be '
                "stored as real data); set bench.simulated = true with a [simulation] table, or give "
                "the instrument's real resource",
            )


def build_bench(r: BenchFileReader, text: str, base_dir: Path) -> BenchConfig:
    r.table("bench")
    name = r.string("bench.name")
    simulated = r.boolean("bench.simulated", False)
    visa_library = read_visa_library(r, base_dir)
    sample = _sample(r, base_dir)
    probe = _probe(r)
    pump = _pump(r)
    if sample.spectrum_file is not None:
        sample = _sample_from_spectrum(r, sample, probe, pump)
    _check_optical_depth(r, sample)
    instruments = _instruments(r)
    guard = _guard(r, pump)
    run = RunConfig(
        log_dir=Path(r.string("run.log_dir", "logs"))
        if r.table("run", required=False) is not None
        else Path("logs"),
        flush_interval=r.positive("run.flush_interval", "time", "1 s"),
        operator=r.string("run.operator", ""),
        estimate_every=r.positive("run.estimate_every", "time", "0.25 s"),
    )
    if run.flush_interval > 1.0:
        raise r.fail("run.flush_interval", "must be at most 1 s (nothing older than that may be lost)")
    simulation = _simulation(r) if r.table("simulation", required=False) is not None else None
    if simulated and simulation is None:
        raise ConfigError(f"{r.source}: bench.simulated is true but there is no [simulation] table")
    if simulated:
        for role, inst in instruments.items():
            if inst.resource != "simulated":
                raise r.fail(f"instruments.{role}.resource", 'a simulated bench needs resource = "simulated"')
    _refuse_simulator_on_a_real_bench(r, simulated, instruments)
    _refuse_two_visa_libraries(r, instruments)
    return BenchConfig(
        source=r.source,
        text=text,
        name=name,
        simulated=simulated,
        sample=sample,
        probe=probe,
        pump=pump,
        instruments=instruments,
        guard=guard,
        run=run,
        simulation=simulation,
        visa_library=visa_library,
    )


def _refuse_two_visa_libraries(r: BenchFileReader, instruments: dict[str, InstrumentConfig]) -> None:
    """An instrument's own ``visa_backend`` option (kept from before ``[bench] visa_library``)
    must not name another library than the bench's, when the bench names one."""
    if r.get(VISA_LIBRARY_KEY, None) is None:
        return
    for role, inst in instruments.items():
        own = inst.options.get("visa_backend")
        if own is not None and own != r.get(VISA_LIBRARY_KEY):
            raise r.fail(
                f"instruments.{role}.options",
                f"visa_backend = {own!r} differs from {VISA_LIBRARY_KEY} = {r.get(VISA_LIBRARY_KEY)!r}; "
                "every VISA instrument of a bench opens through one library: name it once, in "
                f"{VISA_LIBRARY_KEY}",
            )


def _sample(r: BenchFileReader, base_dir: Path) -> SampleConfig:
    r.table("sample")
    length = r.bounded("sample.length", "length", *LENGTH_RANGE, "m")
    n_total = r.bounded("sample.n_total", "density", 0.0, N_TOTAL_MAX, "m^-3")
    tau = r.bounded("sample.upper_state_lifetime", "time", *LIFETIME_RANGE, "s")
    temperature = r.positive("sample.temperature", "temperature", "295 K")
    n = r.number("sample.refractive_index", 1.5, lo=1.0, hi=5.0)
    spectrum = r.get("sample.spectrum", None)
    zero_line = r.wavelength("sample.zero_line", None)
    has_numbers = r.table("sample.cross_sections", required=False) is not None
    if spectrum is not None and has_numbers:
        raise ConfigError(
            f"{r.source}: [sample] gives both spectrum and [sample.cross_sections]; give one of them"
        )
    if spectrum is None and not has_numbers:
        raise ConfigError(
            f'{r.source}: [sample] needs either [sample.cross_sections] or spectrum = "FILE.csv"'
        )
    if has_numbers:
        sigma = CrossSections(
            probe_emission=_cross_section(r, "probe_emission"),
            probe_absorption=_cross_section(r, "probe_absorption", "0 cm^2"),
            pump_absorption=_cross_section(r, "pump_absorption"),
            pump_emission=_cross_section(r, "pump_emission", "0 cm^2"),
        )
        spectrum_file = None
    else:
        if not isinstance(spectrum, str) or not spectrum.strip():
            raise r.fail("sample.spectrum", f"{spectrum!r} is not a file name")
        spectrum_file = Path(spectrum)
        if not spectrum_file.is_absolute():
            spectrum_file = base_dir / spectrum_file
        sigma = CrossSections(0.0, 0.0, 0.0, 0.0)  # filled from the spectrum below
    r.table("sample.uncertainty", required=False)
    unc = SampleUncertainty(
        length=r.positive("sample.uncertainty.length", "length", "0 m", allow_zero=True),
        n_total=r.relative("sample.uncertainty.n_total", 0.0),
        cross_sections=r.relative("sample.uncertainty.cross_sections", 0.0),
        upper_state_lifetime=r.relative("sample.uncertainty.upper_state_lifetime", 0.0),
        temperature_dependence=r.relative("sample.uncertainty.temperature_dependence", 0.0),
    )
    r.table("sample.temperature_dependence", required=False)
    per_k = {}
    for name in ("probe_absorption", "probe_emission"):
        key = f"sample.temperature_dependence.{name}"
        per_k[name] = r.quantity(key, "per_kelvin", "0 %/K")
        if abs(per_k[name]) > TEMPERATURE_COEFFICIENT_MAX:
            raise r.fail(
                key,
                f"is above {TEMPERATURE_COEFFICIENT_MAX * 100:g} %/K in size, more than any cross-section changes",
            )
    if unc.length >= length:
        raise r.fail("sample.uncertainty.length", "is not smaller than the sample length")
    return SampleConfig(
        label=r.string("sample.label"),
        sample_id=r.string("sample.sample_id", ""),
        length=length,
        n_total=n_total,
        upper_state_lifetime=tau,
        temperature=temperature,
        refractive_index=n,
        sigma=sigma,
        uncertainty=unc,
        spectrum_file=spectrum_file,
        zero_line=zero_line,
        probe_absorption_per_kelvin=per_k["probe_absorption"],
        probe_emission_per_kelvin=per_k["probe_emission"],
    )


def _cross_section(r: BenchFileReader, name: str, default: Any = ...) -> float:
    key = f"sample.cross_sections.{name}"
    value = r.positive(key, "area", default, allow_zero=default is not ...)
    if value > CROSS_SECTION_MAX:
        raise r.fail(
            key,
            f'"{r.get(key, default)}" is above {CROSS_SECTION_MAX * 1e4:g} cm^2, larger than any laser '
            "transition's cross-section",
        )
    return value


def _check_optical_depth(r: BenchFileReader, sample: SampleConfig) -> None:
    """(sigma_e + sigma_a) N_total L at the probe within `OPTICAL_DEPTH_MAX`."""
    depth = (sample.sigma.probe_emission + sample.sigma.probe_absorption) * sample.n_total * sample.length
    if not depth <= OPTICAL_DEPTH_MAX:
        raise ConfigError(
            f"{r.where('sample.length')}: (sigma_e + sigma_a) x n_total x length at the probe is {depth:.3g}, above "
            f"{OPTICAL_DEPTH_MAX:g} (a single-pass gain or loss beyond {OPTICAL_DEPTH_MAX * 10 / math.log(10):.0f} dB); "
            "check sample.length, sample.n_total and the cross-sections and their units"
        )


def _sample_from_spectrum(
    r: BenchFileReader, sample: SampleConfig, probe: ProbeConfig, pump: PumpConfig
) -> SampleConfig:
    epsilon = photon_energy(sample.zero_line) if sample.zero_line is not None else None
    path = sample.spectrum_file
    assert path is not None
    # a run's own copy of the spectrum when its bench file is read back (bench.run.replay)
    spec = spectra.spectrum_for_bench(path, epsilon=epsilon, temperature=sample.temperature)
    if spec is None:
        raise r.fail("sample.spectrum", f"no such file {path.name!r} (looked in {path.parent})")
    sa_probe, se_probe = spec.at(probe.wavelength)
    sa_pump, se_pump = spec.at(pump.wavelength)
    sigma = CrossSections(
        probe_emission=float(se_probe),
        probe_absorption=float(sa_probe),
        pump_absorption=float(sa_pump),
        pump_emission=float(se_pump),
    )
    if sigma.probe_emission <= 0 or sigma.pump_absorption <= 0:
        raise r.fail(
            "sample.spectrum", "gives no emission at the probe or no absorption at the pump wavelength"
        )
    return replace(sample, sigma=sigma)


def _probe(r: BenchFileReader) -> ProbeConfig:
    r.table("probe")
    kind = r.string("probe.kind", "cw")
    if kind not in ("cw", "pulsed"):
        raise r.fail("probe.kind", f"{kind!r} is not one of: cw, pulsed")
    pulse_energy = r.positive("probe.pulse_energy", "energy", None)
    if kind == "pulsed" and pulse_energy is None:
        raise ConfigError(f"{r.source}: probe.kind is pulsed, so probe.pulse_energy is needed")
    return ProbeConfig(
        wavelength=r.wavelength("probe.wavelength"),
        power=r.bounded("probe.power", "power", 1e-300, PROBE_POWER_MAX, "W"),
        beam_diameter=r.bounded("probe.beam_diameter", "length", *BEAM_DIAMETER_RANGE, "m"),
        kind=kind,
        pulse_energy=pulse_energy,
        weak_fraction=r.number("probe.weak_fraction", 0.05, lo=1e-6, hi=1.0),
    )


#: Pump pulse widths and periods a bench file may give, s.
PULSE_WIDTH_RANGE = (1e-6, 1.0)
PULSE_PERIOD_RANGE = (10e-6, 10.0)


def _pump(r: BenchFileReader) -> PumpConfig:
    r.table("pump")
    pump = PumpConfig(
        wavelength=r.wavelength("pump.wavelength"),
        max_current=r.bounded("pump.max_current", "current", 1e-300, PUMP_CURRENT_MAX, "A"),
        diode_current_rating=r.bounded("pump.diode_current_rating", "current", 1e-300, PUMP_CURRENT_MAX, "A"),
        threshold_current=r.positive("pump.threshold_current", "current", "0 A", allow_zero=True),
        slope_efficiency=r.bounded("pump.slope_efficiency", "slope", 0.0, SLOPE_EFFICIENCY_MAX, "W/A"),
        beam_diameter=r.bounded("pump.beam_diameter", "length", *BEAM_DIAMETER_RANGE, "m"),
        pulse_width=r.bounded("pump.pulse_width", "time", *PULSE_WIDTH_RANGE, "s", None),
        pulse_period=r.bounded("pump.pulse_period", "time", *PULSE_PERIOD_RANGE, "s", None),
    )
    if (pump.pulse_width is None) != (pump.pulse_period is None):
        missing = "pump.pulse_period" if pump.pulse_period is None else "pump.pulse_width"
        raise r.fail(
            missing, "is needed too: pulsed pumping takes both pump.pulse_width and pump.pulse_period"
        )
    if pump.pulse_width is not None and not pump.pulse_width < pump.pulse_period:
        raise r.fail(
            "pump.pulse_width",
            f"{pump.pulse_width:g} s is not below pump.pulse_period ({pump.pulse_period:g} s)",
        )
    if pump.max_current > pump.diode_current_rating:
        raise r.fail(
            "pump.max_current",
            f"{pump.max_current:g} A is above pump.diode_current_rating ({pump.diode_current_rating:g} A)",
        )
    if pump.threshold_current >= pump.max_current:
        raise r.fail("pump.threshold_current", "is not below pump.max_current")
    return pump


def _instruments(r: BenchFileReader) -> dict[str, InstrumentConfig]:
    table = r.table("instruments")
    assert table is not None
    out: dict[str, InstrumentConfig] = {}
    for role in table:
        if role not in ROLES:
            raise r.fail(f"instruments.{role}", f"unknown role; expected one of: {', '.join(ROLES)}")
        base = f"instruments.{role}"
        r.table(base)
        options = r.get(f"{base}.options", {})
        if not isinstance(options, dict):
            raise r.fail(f"{base}.options", 'expected a table, e.g. options = { sample_rate = "100 kHz" }')
        resource = r.string(f"{base}.resource")
        if not resource.strip():
            raise r.fail(
                f"{base}.resource", 'is empty; expected a VISA resource, serial port, URL or "simulated"'
            )
        out[role] = InstrumentConfig(
            role=role,
            driver=r.string(f"{base}.driver"),
            resource=resource.strip(),
            profile=r.string(f"{base}.profile"),
            timeout=r.positive(f"{base}.timeout", "time", "1 s"),
            options=dict(options),
        )
    for role in ("detector", "pump"):
        if role not in out:
            raise ConfigError(f"{r.source}: missing table [instruments.{role}] (a bench needs a {role})")
    return out


def _guard(r: BenchFileReader, pump: PumpConfig) -> GuardConfig:
    r.table("guard")
    jump = r.get("guard.transmission_jump", None)
    guard = GuardConfig(
        max_current=r.positive("guard.max_current", "current"),
        current_tolerance=r.bounded(
            "guard.current_tolerance",
            "current",
            0.0,
            CURRENT_TOLERANCE_MAX_FRACTION * pump.diode_current_rating,
            "A",
            "0.2 A",
        ),
        mount_temperature_min=_mount_temperature(r, "guard.mount_temperature_min"),
        mount_temperature_max=_mount_temperature(r, "guard.mount_temperature_max"),
        full_scale_fraction=r.number("guard.full_scale_fraction", 0.95, lo=0.1, hi=1.0),
        stale_after=r.bounded("guard.stale_after", "time", 0.0, STALE_AFTER_MAX, "s", "0.5 s"),
        comm_failures=r.integer("guard.comm_failures", 3, lo=1, hi=COMM_FAILURES_MAX),
        transmission_jump=None
        if jump is None
        else r.number("guard.transmission_jump", lo=0.01, hi=TRANSMISSION_JUMP_MAX),
    )
    if guard.mount_temperature_min >= guard.mount_temperature_max:
        raise r.fail("guard.mount_temperature_min", "is not below guard.mount_temperature_max")
    if guard.max_current > pump.diode_current_rating:
        raise r.fail(
            "guard.max_current",
            f"{guard.max_current:g} A is above pump.diode_current_rating ({pump.diode_current_rating:g} A)",
        )
    return guard


def _mount_temperature(r: BenchFileReader, key: str) -> float:
    lo, hi = MOUNT_TEMPERATURE_RANGE
    value = r.positive(key, "temperature")
    if not lo <= value <= hi:
        raise r.fail(
            key,
            f'"{r.get(key)}" is outside {lo - 273.15:g} degC ... {hi - 273.15:g} degC, the range '
            "laser-diode mounts are run in",
        )
    return value


def _simulation(r: BenchFileReader) -> SimulationConfig:
    s = "simulation"
    return SimulationConfig(
        seed=r.integer(f"{s}.seed", 1, lo=0),
        slices=r.integer(f"{s}.slices", 24, lo=1, hi=1000),
        model_step=r.positive(f"{s}.model_step", "time", "10 us"),
        probe_signal=r.positive(f"{s}.probe_signal", "voltage", "0.8 V"),
        reference_signal=r.positive(f"{s}.reference_signal", "voltage", "0.6 V"),
        relative_intensity_noise=r.number(f"{s}.relative_intensity_noise", 1e-3, lo=0.0, hi=0.5),
        detector_noise=r.positive(f"{s}.detector_noise", "voltage", "0.5 mV", allow_zero=True),
        dark_probe=r.positive(f"{s}.dark_probe", "voltage", "3 mV", allow_zero=True),
        dark_reference=r.positive(f"{s}.dark_reference", "voltage", "2 mV", allow_zero=True),
        drift_per_hour=r.number(f"{s}.drift_per_hour", 0.0, lo=0.0, hi=1.0),
        adc_bits=r.integer(f"{s}.adc_bits", 16, lo=8, hi=24),
        pump_monitor_per_watt=r.positive(f"{s}.pump_monitor_per_watt", "volts_per_watt", "0.1 V/W"),
        ambient_temperature=r.positive(f"{s}.ambient_temperature", "temperature", "22 degC"),
        mount_heating=r.positive(f"{s}.mount_heating", "kelvin_per_amp", "0.8 K/A", allow_zero=True),
        thermal_time_constant=r.positive(f"{s}.thermal_time_constant", "time", "20 s"),
        fluorescence_on_probe=r.positive(f"{s}.fluorescence_on_probe", "power", "0 W", allow_zero=True),
        sample_heating=r.positive(f"{s}.sample_heating", "kelvin_per_watt", "0 K/W", allow_zero=True),
        sample_thermal_time_constant=r.positive(f"{s}.sample_thermal_time_constant", "time", "5 s"),
    )
