"""Bench files: TOML written by hand, with units, read into frozen dataclasses of SI floats.

A bench file describes one bench: the sample, the probe and pump lasers, the instruments and
their roles, the guard's limits, the run settings, and (for the simulated bench) the
simulation's noise and drift. `load_bench` reads one; every problem is a `ConfigError` that
names the file, the key (and its line) and what was expected, and nothing past this module sees
a unit string.
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from bench.errors import ConfigError
from bench.units import parse_quantity, parse_relative

#: Wavelengths a bench file may name (the tool's physics and safety tables stop there).
WAVELENGTH_RANGE = (200e-9, 20e-6)

ROLES = ("detector", "pump", "shutter", "wavelength")

#: A bench file is a few kB; more than this is the wrong file (or a device that never ends).
BENCH_FILE_MAX_BYTES = 1_000_000

# Bounds of values a bench file (and ``--set``, which passes through the same reader) may
# give. Each is far outside what a real bench needs and inside what the tool's arithmetic
# and the guard's job survive; common practice, no source, unless a value says otherwise.

#: 1/e² beam diameters at the sample, m: no free-space beam at 200 nm - 20 um focuses below
#: 1 um (diffraction), and no lab sample is pumped or probed through a beam wider than 10 cm.
BEAM_DIAMETER_RANGE = (1e-6, 0.1)
#: Upper-state lifetimes, s. Long-lived laser levels live about 10 ms (Er3+ 4I13/2 in glass,
#: from memory); 100 ms leaves a factor ten. The baseline and the chopping wait several
#: lifetimes for the medium to relax, so a lifetime of minutes would make them wait for hours.
LIFETIME_RANGE = (1e-9, 0.1)
#: Active-ion density, m^-3: stoichiometric Yb or Nd crystals hold about 1.4e22 cm^-3 (from
#: memory); no solid holds ten times that.
N_TOTAL_MAX = 1e29
#: Cross-sections, m² (1e-14 cm²): above those of dyes and semiconductors, the largest of
#: laser transitions (about 1e-16 cm², from memory).
CROSS_SECTION_MAX = 1e-18
#: Sample length, m (long fibre amplifiers are tens of metres).
LENGTH_RANGE = (1e-6, 100.0)
#: (sigma_e + sigma_a) N_total L at the probe: exp(200) is 7e86, a gain or loss of 870 dB in
#: one pass that no probe is measured through (double precision overflows at exp(709)).
OPTICAL_DEPTH_MAX = 200.0
#: Pump slope efficiency, W/A: at most h nu / e per emitter in series (1.3 W/A at 940 nm, a
#: quantum efficiency of 1); 1000 W/A would be some 750 emitters in series.
SLOPE_EFFICIENCY_MAX = 1000.0

#: The guard's limits. A value outside switches a trip condition off in effect:
#: - stale_after: a pump left on with no fresh reading for longer than a few seconds is
#:   unsupervised (5 s leaves room for a loaded lab PC and slow instruments);
#: - comm_failures: more than 10 failed exchanges in a row is a link that is down, not a glitch;
#: - mount temperatures: laser-diode mounts are run within about -10 degC to 60 degC; a window
#:   reaching beyond that would never trip on a failed cooler;
#: - current_tolerance: the over-current trip fires at max_current + current_tolerance, so more
#:   than 10 % of the diode's rating would let the diode run well above its rating;
#: - transmission_jump: a beam blocked or a sample broken makes S fall towards 0, a relative
#:   change of at most 1; above 0.9 such a fall could not trip.
STALE_AFTER_MAX = 5.0
COMM_FAILURES_MAX = 10
MOUNT_TEMPERATURE_RANGE = (263.15, 333.15)
CURRENT_TOLERANCE_MAX_FRACTION = 0.1
TRANSMISSION_JUMP_MAX = 0.9


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


# --------------------------------------------------------------------------------------------
# Reading


def builtin_bench_path() -> Path:
    """The built-in bench file for the simulated bench (package data)."""
    return Path(str(resources.files("bench") / "data" / "demo_bench.toml"))


def load_bench(path: str | Path | None = None, overrides: Mapping[str, str] | None = None) -> BenchConfig:
    """Read a bench file (the built-in simulated bench when ``path`` is None).

    ``overrides`` maps dotted keys to values written as in the file (``{"sample.length":
    "5.1 mm"}``); they replace the file's values before validation, as ``--set`` does.
    """
    if path is None:
        p = builtin_bench_path()
        source = "<built-in demo bench>"
    else:
        p = Path(path)
        source = str(path)
    try:
        with p.open("rb") as f:
            data = f.read(BENCH_FILE_MAX_BYTES + 1)  # bounded: a device such as /dev/zero never ends
        if len(data) > BENCH_FILE_MAX_BYTES:
            raise ConfigError(f"{source}: larger than {BENCH_FILE_MAX_BYTES // 1000} kB; a bench file is a few kB "
                              "of TOML (is this the right file?)")
        text = data.decode("utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{source}: no such bench file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{source}: cannot read the bench file ({exc})") from None
    cfg = load_bench_text(text, source, overrides=overrides, base_dir=p.parent)
    spectrum = cfg.sample.spectrum_file
    if spectrum is not None and "sample.spectrum" not in cfg.overrides:
        # A relative spectrum path is relative to the bench file's folder. Processes given
        # only the text and the overrides (the simulated bench, the bench process) read the
        # text elsewhere, so the resolved path goes with the overrides.
        from dataclasses import replace

        cfg = replace(cfg, overrides={**cfg.overrides, "sample.spectrum": str(spectrum.resolve())})
    return cfg


def load_bench_text(
    text: str,
    source: str,
    overrides: Mapping[str, str] | None = None,
    base_dir: Path | None = None,
) -> BenchConfig:
    """Parse bench-file text; ``source`` names it in errors. See `load_bench`."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    if overrides:
        raw = _apply_overrides(raw, overrides, source)
    reader = _Reader(raw, source, text, overridden=set(overrides or ()))
    cfg = _build(reader, text, base_dir or Path.cwd())
    reader.reject_unknown()
    from dataclasses import replace

    return replace(cfg, overrides=dict(overrides or {}), base_dir=base_dir)


def parse_overrides(items: list[str] | None) -> dict[str, str]:
    """``["sample.length=5.1mm", ...]`` (command-line ``--set``) -> ``{"sample.length": "5.1mm"}``."""
    out: dict[str, str] = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise ConfigError(f"--set {item!r}: expected KEY=VALUE, e.g. sample.length=5.1mm")
        out[key.strip()] = value.strip()
    return out


def _apply_overrides(raw: dict, overrides: Mapping[str, str], source: str) -> dict:
    import copy

    raw = copy.deepcopy(raw)
    for key, value in overrides.items():
        parts = key.split(".")
        node = raw
        for part in parts[:-1]:
            nxt = node.get(part)
            if not isinstance(nxt, dict):
                raise ConfigError(f"--set {key}: {source} has no table [{'.'.join(parts[:-1])}]")
            node = nxt
        old = node.get(parts[-1])
        if old is None:
            raise ConfigError(f"--set {key}: {source} has no key {key} to override")
        if isinstance(old, bool):
            if value.lower() not in ("true", "false"):
                raise ConfigError(f"--set {key}={value}: expected true or false")
            node[parts[-1]] = value.lower() == "true"
        elif isinstance(old, int):
            try:
                node[parts[-1]] = int(value)
            except ValueError:
                raise ConfigError(f"--set {key}={value}: expected a whole number") from None
        elif isinstance(old, float):
            try:
                node[parts[-1]] = float(value)
            except ValueError:
                raise ConfigError(f"--set {key}={value}: expected a number") from None
        elif isinstance(old, str):
            node[parts[-1]] = value
        else:
            raise ConfigError(f"--set {key}: only single values can be overridden, not tables or lists")
    return raw


class _Reader:
    """Walks the TOML tree, remembers which keys were used, and words every error."""

    def __init__(self, raw: dict, source: str, text: str, overridden: set[str] | None = None):
        self.raw = raw
        self.source = source
        self.text = text
        self.overridden = overridden or set()
        self.used: set[str] = set()
        self.known_tables: set[str] = set()

    # -- locating --------------------------------------------------------------------------
    def where(self, key: str) -> str:
        if key in self.overridden:
            return f"--set {key} (over {self.source})"
        line = _line_of(self.text, key)
        return f"{self.source}: {key}" + (f" (line {line})" if line else "")

    def fail(self, key: str, message: str) -> ConfigError:
        return ConfigError(f"{self.where(key)}: {message}")

    def _lookup(self, key: str) -> tuple[bool, Any]:
        node: Any = self.raw
        for part in key.split("."):
            if not isinstance(node, dict) or part not in node:
                return False, None
            node = node[part]
        return True, node

    # -- typed access ----------------------------------------------------------------------
    def table(self, key: str, required: bool = True) -> dict | None:
        self.known_tables.add(key)
        found, value = self._lookup(key)
        if not found:
            if required:
                raise ConfigError(f"{self.source}: missing table [{key}]")
            return None
        if not isinstance(value, dict):
            raise self.fail(key, "expected a table")
        return value

    def get(self, key: str, default: Any = ..., ) -> Any:
        self.used.add(key)
        found, value = self._lookup(key)
        if not found:
            if default is ...:
                raise ConfigError(f"{self.source}: missing key {key}")
            return default
        return value

    def quantity(self, key: str, kind: str, default: Any = ...) -> float:
        value = self.get(key, default)
        if value is None:
            return None  # type: ignore[return-value]
        return parse_quantity(value, kind, self.where(key))

    def positive(self, key: str, kind: str, default: Any = ..., allow_zero: bool = False) -> float:
        value = self.quantity(key, kind, default)
        if value is None:
            return None  # type: ignore[return-value]
        if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
            word = "negative" if value < 0 else ("zero" if value == 0 else "not finite")
            raise self.fail(key, f'"{self.get(key)}" is {word}; expected a positive value')
        return value

    def bounded(self, key: str, kind: str, lo: float, hi: float, unit: str, default: Any = ...) -> float:
        """A positive quantity within [lo, hi] (SI); the error names the key, the value and the bound."""
        value = self.positive(key, kind, default)
        if value is None:
            return None  # type: ignore[return-value]
        if value < lo:
            raise self.fail(key, f'"{self.get(key)}" is below {lo:g} {unit}, the smallest this tool accepts')
        if value > hi:
            raise self.fail(key, f'"{self.get(key)}" is above {hi:g} {unit}, the largest this tool accepts')
        return value

    def wavelength(self, key: str, default: Any = ...) -> float:
        value = self.positive(key, "length", default)
        if value is None:
            return None  # type: ignore[return-value]
        lo, hi = WAVELENGTH_RANGE
        if not lo <= value <= hi:
            raise self.fail(key, f'"{self.get(key)}" is outside 200 nm - 20 um')
        return value

    def string(self, key: str, default: Any = ...) -> str:
        value = self.get(key, default)
        if not isinstance(value, str):
            raise self.fail(key, f"{value!r} is not text; expected a quoted string")
        return value

    def number(self, key: str, default: Any = ..., lo: float | None = None, hi: float | None = None) -> float:
        value = self.get(key, default)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.fail(key, f"{value!r} is not a plain number")
        value = float(value)
        if (lo is not None and value < lo) or (hi is not None and value > hi) or not math.isfinite(value):
            raise self.fail(key, f"{value!r} is outside {lo} ... {hi}")
        return value

    def integer(self, key: str, default: Any = ..., lo: int | None = None, hi: int | None = None) -> int:
        value = self.get(key, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(key, f"{value!r} is not a whole number")
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise self.fail(key, f"{value!r} is outside {lo} ... {hi}")
        return value

    def boolean(self, key: str, default: Any = ...) -> bool:
        value = self.get(key, default)
        if not isinstance(value, bool):
            raise self.fail(key, f"{value!r} is not true or false")
        return value

    def relative(self, key: str, default: Any = ...) -> float:
        return parse_relative(self.get(key, default), self.where(key))

    # -- strictness ------------------------------------------------------------------------
    def reject_unknown(self) -> None:
        """A key nobody read is a typo until proven otherwise."""

        def walk(node: dict, prefix: str) -> None:
            for k, v in node.items():
                dotted = f"{prefix}{k}"
                if dotted in self.used:
                    continue
                if isinstance(v, dict) and (dotted in self.known_tables or _is_free_table(dotted)):
                    if not _is_free_table(dotted):
                        walk(v, dotted + ".")
                    continue
                known = sorted(
                    u[len(prefix):].split(".")[0] for u in self.used | self.known_tables if u.startswith(prefix)
                )
                hint = f"; expected one of: {', '.join(dict.fromkeys(known))}" if known else ""
                raise ConfigError(f"{self.where(dotted)}: unknown key{hint}")

        walk(self.raw, "")


def _is_free_table(dotted: str) -> bool:
    """Tables whose keys belong to someone else (instrument options go to the driver)."""
    return bool(re.fullmatch(r"instruments\.[^.]+\.options", dotted))


def line_of(text: str, key: str) -> int | None:
    """Line number of a dotted key in bench-file text, or None (for errors found past this module)."""
    return _line_of(text, key)


def _line_of(text: str, key: str) -> int | None:
    """Best-effort line number of a dotted key in TOML text (tomllib gives none)."""
    parts = key.split(".")
    table, leaf = ".".join(parts[:-1]), parts[-1]
    current = ""
    header = re.compile(r"^\s*\[\s*([^\]]+?)\s*\]\s*(#.*)?$")
    for number, line in enumerate(text.splitlines(), start=1):
        m = header.match(line)
        if m:
            current = m.group(1).strip()
            if current == key:
                return number
            continue
        stripped = line.strip()
        if current == table and re.match(rf"^{re.escape(leaf)}\s*=", stripped):
            return number
        if table and current == ".".join(parts[:-2]) and re.match(rf"^{re.escape(parts[-2])}\s*=", stripped):
            return number  # inline table, e.g. options = { ... }
    return None


# --------------------------------------------------------------------------------------------
# Building


def _refuse_simulator_on_a_real_bench(r: _Reader, simulated: bool, instruments: Mapping[str, Any]) -> None:
    """A bench that is not simulated must not name the simulator: its data would be stored as
    real (no simulation banner, tag or ground truth)."""
    if simulated:
        return
    for role, inst in instruments.items():
        if inst.resource == "simulated":
            raise r.fail(f"instruments.{role}.resource",
                         '"simulated" is the simulated bench, but bench.simulated is false (the run would be '
                         "stored as real data); set bench.simulated = true with a [simulation] table, or give "
                         "the instrument's real resource")


def _build(r: _Reader, text: str, base_dir: Path) -> BenchConfig:
    r.table("bench")
    name = r.string("bench.name")
    simulated = r.boolean("bench.simulated", False)
    sample = _sample(r, base_dir)
    probe = _probe(r)
    pump = _pump(r)
    if sample.spectrum_file is not None:
        sample = _sample_from_spectrum(r, sample, probe, pump)
    _check_optical_depth(r, sample)
    instruments = _instruments(r)
    guard = _guard(r, pump)
    run = RunConfig(
        log_dir=Path(r.string("run.log_dir", "logs")) if r.table("run", required=False) is not None else Path("logs"),
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
    )


def _sample(r: _Reader, base_dir: Path) -> SampleConfig:
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
            f"{r.source}: [sample] needs either [sample.cross_sections] or spectrum = \"FILE.csv\""
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
    )


def _cross_section(r: _Reader, name: str, default: Any = ...) -> float:
    key = f"sample.cross_sections.{name}"
    value = r.positive(key, "area", default, allow_zero=default is not ...)
    if value > CROSS_SECTION_MAX:
        raise r.fail(key, f'"{r.get(key, default)}" is above {CROSS_SECTION_MAX * 1e4:g} cm^2, larger than any laser '
                          "transition's cross-section")
    return value


def _check_optical_depth(r: _Reader, sample: SampleConfig) -> None:
    """(sigma_e + sigma_a) N_total L at the probe within `OPTICAL_DEPTH_MAX`."""
    depth = (sample.sigma.probe_emission + sample.sigma.probe_absorption) * sample.n_total * sample.length
    if not depth <= OPTICAL_DEPTH_MAX:
        raise ConfigError(
            f"{r.where('sample.length')}: (sigma_e + sigma_a) x n_total x length at the probe is {depth:.3g}, above "
            f"{OPTICAL_DEPTH_MAX:g} (a single-pass gain or loss beyond {OPTICAL_DEPTH_MAX * 10 / math.log(10):.0f} dB); "
            "check sample.length, sample.n_total and the cross-sections and their units"
        )


def _sample_from_spectrum(r: _Reader, sample: SampleConfig, probe: ProbeConfig, pump: PumpConfig) -> SampleConfig:
    from dataclasses import replace

    from bench.physics import spectra
    from bench.physics import photon_energy

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
        raise r.fail("sample.spectrum", "gives no emission at the probe or no absorption at the pump wavelength")
    return replace(sample, sigma=sigma)


def _probe(r: _Reader) -> ProbeConfig:
    r.table("probe")
    kind = r.string("probe.kind", "cw")
    if kind not in ("cw", "pulsed"):
        raise r.fail("probe.kind", f"{kind!r} is not one of: cw, pulsed")
    pulse_energy = r.positive("probe.pulse_energy", "energy", None)
    if kind == "pulsed" and pulse_energy is None:
        raise ConfigError(f"{r.source}: probe.kind is pulsed, so probe.pulse_energy is needed")
    return ProbeConfig(
        wavelength=r.wavelength("probe.wavelength"),
        power=r.positive("probe.power", "power"),
        beam_diameter=r.bounded("probe.beam_diameter", "length", *BEAM_DIAMETER_RANGE, "m"),
        kind=kind,
        pulse_energy=pulse_energy,
        weak_fraction=r.number("probe.weak_fraction", 0.05, lo=1e-6, hi=1.0),
    )


def _pump(r: _Reader) -> PumpConfig:
    r.table("pump")
    pump = PumpConfig(
        wavelength=r.wavelength("pump.wavelength"),
        max_current=r.positive("pump.max_current", "current"),
        diode_current_rating=r.positive("pump.diode_current_rating", "current"),
        threshold_current=r.positive("pump.threshold_current", "current", "0 A", allow_zero=True),
        slope_efficiency=r.bounded("pump.slope_efficiency", "slope", 0.0, SLOPE_EFFICIENCY_MAX, "W/A"),
        beam_diameter=r.bounded("pump.beam_diameter", "length", *BEAM_DIAMETER_RANGE, "m"),
    )
    if pump.max_current > pump.diode_current_rating:
        raise r.fail(
            "pump.max_current",
            f"{pump.max_current:g} A is above pump.diode_current_rating ({pump.diode_current_rating:g} A)",
        )
    if pump.threshold_current >= pump.max_current:
        raise r.fail("pump.threshold_current", "is not below pump.max_current")
    return pump


def _instruments(r: _Reader) -> dict[str, InstrumentConfig]:
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
            raise r.fail(f"{base}.options", "expected a table, e.g. options = { sample_rate = \"100 kHz\" }")
        resource = r.string(f"{base}.resource")
        if not resource.strip():
            raise r.fail(f"{base}.resource", "is empty; expected a VISA resource, serial port, URL or \"simulated\"")
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


def _guard(r: _Reader, pump: PumpConfig) -> GuardConfig:
    r.table("guard")
    jump = r.get("guard.transmission_jump", None)
    guard = GuardConfig(
        max_current=r.positive("guard.max_current", "current"),
        current_tolerance=r.bounded("guard.current_tolerance", "current", 0.0,
                                    CURRENT_TOLERANCE_MAX_FRACTION * pump.diode_current_rating, "A", "0.2 A"),
        mount_temperature_min=_mount_temperature(r, "guard.mount_temperature_min"),
        mount_temperature_max=_mount_temperature(r, "guard.mount_temperature_max"),
        full_scale_fraction=r.number("guard.full_scale_fraction", 0.95, lo=0.1, hi=1.0),
        stale_after=r.bounded("guard.stale_after", "time", 0.0, STALE_AFTER_MAX, "s", "0.5 s"),
        comm_failures=r.integer("guard.comm_failures", 3, lo=1, hi=COMM_FAILURES_MAX),
        transmission_jump=None if jump is None else r.number("guard.transmission_jump", lo=0.01,
                                                             hi=TRANSMISSION_JUMP_MAX),
    )
    if guard.mount_temperature_min >= guard.mount_temperature_max:
        raise r.fail("guard.mount_temperature_min", "is not below guard.mount_temperature_max")
    if guard.max_current > pump.diode_current_rating:
        raise r.fail(
            "guard.max_current",
            f"{guard.max_current:g} A is above pump.diode_current_rating ({pump.diode_current_rating:g} A)",
        )
    return guard


def _mount_temperature(r: _Reader, key: str) -> float:
    lo, hi = MOUNT_TEMPERATURE_RANGE
    value = r.positive(key, "temperature")
    if not lo <= value <= hi:
        raise r.fail(key, f'"{r.get(key)}" is outside {lo - 273.15:g} degC ... {hi - 273.15:g} degC, the range '
                          "laser-diode mounts are run in")
    return value


def _simulation(r: _Reader) -> SimulationConfig:
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
    )
