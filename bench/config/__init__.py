"""Bench files: TOML written by hand, with units, read into frozen dataclasses of SI floats.

A bench file describes one bench: the sample, the probe and pump lasers, the instruments and
their roles, the guard's limits, the run settings, and (for the simulated bench) the
simulation's noise and drift. `load_bench` reads one; every problem is a `ConfigError` that
names the file, the key (and its line) and what was expected, and nothing past this package sees
a unit string.

The parts: `model` (the dataclasses), `limits` (the bounds a value may take), `toml_reader`
(typed access to the TOML tree, overrides, unknown keys, error wording), `sections` (one builder
per table) and `loading` (files and text in, `BenchConfig` out). Import from `bench.config`.
"""

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
    SLOPE_EFFICIENCY_MAX,
    STALE_AFTER_MAX,
    TRANSMISSION_JUMP_MAX,
    WAVELENGTH_RANGE,
)
from bench.config.loading import (
    BENCH_FILE_MAX_BYTES,
    builtin_bench_path,
    load_bench,
    load_bench_text,
    parse_overrides,
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
from bench.config.toml_reader import (
    line_of,
)

__all__ = [
    "BEAM_DIAMETER_RANGE",
    "BENCH_FILE_MAX_BYTES",
    "BenchConfig",
    "COMM_FAILURES_MAX",
    "CROSS_SECTION_MAX",
    "CURRENT_TOLERANCE_MAX_FRACTION",
    "CrossSections",
    "GuardConfig",
    "InstrumentConfig",
    "LENGTH_RANGE",
    "LIFETIME_RANGE",
    "MOUNT_TEMPERATURE_RANGE",
    "N_TOTAL_MAX",
    "OPTICAL_DEPTH_MAX",
    "ProbeConfig",
    "PumpConfig",
    "ROLES",
    "RunConfig",
    "SLOPE_EFFICIENCY_MAX",
    "STALE_AFTER_MAX",
    "SampleConfig",
    "SampleUncertainty",
    "SimulationConfig",
    "TRANSMISSION_JUMP_MAX",
    "WAVELENGTH_RANGE",
    "builtin_bench_path",
    "line_of",
    "load_bench",
    "load_bench_text",
    "parse_overrides",
]
