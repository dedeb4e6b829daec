"""Bench files: every kind of bad input gets a message naming file, key and what was expected.

The messages' shape ("FILE: KEY (line N): what is wrong") is this project's own; the physical
checks (units, ranges) are common practice, no source.
"""

from __future__ import annotations

import math

import pytest

from bench.cli import main
from bench.config import load_bench, load_bench_text, parse_overrides
from bench.errors import ConfigError


def _bad(text: str, old: str, new: str) -> str:
    assert old in text, f"test setup: {old!r} not in the demo bench file"
    with pytest.raises(ConfigError) as info:
        load_bench_text(text.replace(old, new, 1), "bench.toml")
    return str(info.value)


def test_builtin_bench_loads_in_si_units():
    cfg = load_bench()
    assert cfg.simulated
    assert cfg.sample.length == pytest.approx(5e-3)
    assert cfg.sample.n_total == pytest.approx(2.0e26)  # 2.0e20 cm^-3 in m^-3
    assert cfg.sample.sigma.probe_emission == pytest.approx(2.2e-24)  # 2.2e-20 cm^2 in m^2
    assert cfg.probe.wavelength == pytest.approx(1030e-9)
    assert cfg.guard.mount_temperature_min == pytest.approx(288.15)  # 15 degC
    assert cfg.pump.max_power == pytest.approx(1.05 * (9 - 0.6))
    assert "invented" in cfg.sample.label
    assert set(cfg.instruments) >= {"detector", "pump"}


@pytest.mark.parametrize(
    ("old", "new", "expected"),
    [
        ('length = "5 mm"', 'length = "5 kg"', 'sample.length (line 20): "5 kg" is not a length'),
        ('length = "5 mm"', "length = 5", "sample.length (line 20): 5 has no unit"),
        (
            'n_total = "2.0e20 cm^-3"',
            'n_total = "-2.0e20 cm^-3"',
            'sample.n_total (line 21): "-2.0e20 cm^-3" is negative',
        ),
        (
            'wavelength = "1030 nm"',
            'wavelength = "30 um"',
            'probe.wavelength (line 39): "30 um" is outside 200 nm - 20 um',
        ),
        (
            'wavelength = "940 nm"',
            'wavelength = "150 nm"',
            'pump.wavelength (line 46): "150 nm" is outside 200 nm - 20 um',
        ),
        (
            'probe_emission = "2.2e-20 cm^2"',
            'probe_emission = "2.2e-20 cm"',
            "sample.cross_sections.probe_emission (line 27)",
        ),
        (
            "weak_fraction = 0.05",
            "weak_fraction = 0.05\nlenght = 3",
            "probe.lenght (line 44): unknown key; expected one of",
        ),
        (
            'max_current = "9 A"\ndiode',
            'max_current = "11 A"\ndiode',
            "pump.max_current (line 47): 11 A is above pump.diode_current_rating",
        ),
        ('kind = "cw"', 'kind = "pulsd"', "probe.kind (line 42): 'pulsd' is not one of: cw, pulsed"),
        ('kind = "cw"', 'kind = "pulsed"', "probe.kind is pulsed, so probe.pulse_energy is needed"),
        (
            'n_total = "3 %"',
            'n_total = "130 %"',
            "sample.uncertainty.n_total (line 34): '130 %' must be between",
        ),
        (
            'mount_temperature_min = "15 degC"',
            'mount_temperature_min = "40 degC"',
            "guard.mount_temperature_min (line 75): is not below",
        ),
        (
            'flush_interval = "0.5 s"',
            'flush_interval = "5 s"',
            "run.flush_interval (line 84): must be at most 1 s",
        ),
        (
            'estimate_every = "0.25 s"',
            'estimate_every = "0.25 V"',
            'run.estimate_every (line 85): "0.25 V" is not a time',
        ),
        ('estimate_every = "0.25 s"', 'estimate_every = "0 s"', "run.estimate_every (line 85)"),
        ("[instruments.shutter]", "[instruments.chopper]", "instruments.chopper (line 66): unknown role"),
        (
            'resource = "simulated"',
            'resource = "TCPIP::127.0.0.1::5025::SOCKET"',
            'instruments.detector.resource (line 55): a simulated bench needs resource = "simulated"',
        ),
        (
            "comm_failures = 3",
            "comm_failures = 2.5",
            "guard.comm_failures (line 79): 2.5 is not a whole number",
        ),
        (
            "refractive_index = 2.0",
            'refractive_index = "2"',
            "sample.refractive_index (line 24): '2' is not a plain number",
        ),
    ],
)
def test_bad_values_name_key_line_and_expectation(demo_text, old, new, expected):
    message = _bad(demo_text, old, new)
    assert message.startswith("bench.toml: ")
    assert expected in message


def test_missing_table_and_key(demo_text):
    assert "missing table [guard]" in _bad(demo_text, "[guard]", "[gaurd]")
    assert "missing key sample.length" in _bad(demo_text, 'length = "5 mm"\n', "")


def test_toml_syntax_error_names_line():
    with pytest.raises(ConfigError, match=r"bench.toml: not valid TOML: .*line 2"):
        load_bench_text("[bench]\nname = \n", "bench.toml")


def test_missing_file_is_a_clear_error(tmp_path):
    with pytest.raises(ConfigError, match="no such bench file"):
        load_bench(tmp_path / "nope.toml")


def test_overrides_replace_values_before_validation(demo_text):
    cfg = load_bench_text(demo_text, "bench.toml", overrides=parse_overrides(["sample.length=5.1mm"]))
    assert cfg.sample.length == pytest.approx(5.1e-3)
    with pytest.raises(ConfigError, match="sample.length"):
        load_bench_text(demo_text, "bench.toml", overrides={"sample.length": "5.1 kg"})
    with pytest.raises(ConfigError, match=r"--set sample.colour .*unknown key"):
        load_bench_text(demo_text, "bench.toml", overrides={"sample.colour": "red"})
    # a known key the file leaves at its default can be given too, typed as it reads
    assert "fluorescence_on_probe" not in demo_text
    cfg = load_bench_text(demo_text, "bench.toml", overrides={"simulation.fluorescence_on_probe": "20 uW"})
    assert cfg.simulation.fluorescence_on_probe == pytest.approx(20e-6)  # 1 uW = 1e-6 W (SI prefix)
    with pytest.raises(ConfigError, match=r"simulation.fluorescence_on_probe.*not a power"):
        load_bench_text(demo_text, "bench.toml", overrides={"simulation.fluorescence_on_probe": "abc"})
    with pytest.raises(ConfigError, match="expected KEY=VALUE"):
        parse_overrides(["sample.length"])


def test_cross_sections_or_spectrum_required(demo_text):
    start = demo_text.index("[sample.cross_sections]")
    end = demo_text.index("[sample.uncertainty]")
    text = demo_text[:start] + demo_text[end:]
    with pytest.raises(ConfigError, match=r"needs either \[sample.cross_sections\] or spectrum"):
        load_bench_text(text, "bench.toml")


def test_check_command_reports_ok_and_errors_without_traceback(tmp_path, demo_text, capsys):
    assert main(["check"]) == 0
    assert "ok" in capsys.readouterr().out
    bad = tmp_path / "bench.toml"
    bad.write_text(demo_text.replace('length = "5 mm"', 'length = "5 kg"', 1), encoding="utf-8")
    assert main(["check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f'{bad}: sample.length (line 20): "5 kg" is not a length' in err
    assert "Traceback" not in err


def test_bad_file_is_never_modified(tmp_path, demo_text):
    bad = tmp_path / "bench.toml"
    content = demo_text.replace('length = "5 mm"', 'length = "5 kg"', 1)
    bad.write_text(content, encoding="utf-8")
    with pytest.raises(ConfigError):
        load_bench(bad)
    assert bad.read_text(encoding="utf-8") == content


def test_pump_power_calibration():
    cfg = load_bench()
    assert cfg.pump.power_at(0.0) == 0.0
    assert math.isclose(cfg.pump.power_at(5.0), 1.05 * 4.4)


def test_estimate_every_sets_the_estimator_window():
    from bench.estimator.params import EstimatorParams

    cfg = load_bench()
    assert cfg.run.estimate_every == 0.25
    longer = load_bench_text(cfg.text, cfg.source, overrides={"run.estimate_every": "5 s"})
    assert EstimatorParams.from_config(longer).window == 5.0
