"""Bad input through the command line: exit status 2, a message naming the key, file or value,
never a traceback or a hang, and nothing left in the run store.

The bounds themselves (guard limits, lifetimes, densities, beam diameters) are common practice,
no source, as `bench.config` states beside each; the message shape ("FILE: KEY (line N): what
is wrong") is this project's own. The eyewear ODs compared here come from
`bench.safety.exposure_limits.required_od`, whose figures are checked against ICNIRP 2000 /
2006/25/EC in tests/safety/test_laser_safety.py.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

from bench.cli import main
from bench.config import builtin_bench_path, load_bench, load_bench_text
from bench.errors import ConfigError
from bench.run.preflight import check_instruments, lowered_eyewear
from bench.safety import exposure_limits as laser_safety
from bench.safety.checklist_answers import OD_MAX, parse_eyewear_flag, parse_eyewear_flags, parse_od
from bench.store import RunReader, resolve_run
from bench.units import parse_quantity

ARM = ["--operator", "tester", "--eyewear-od", "940nm=5", "--eyewear-od", "1030nm=2", "--confirm-setup"]
RECORD = ["record", "--seconds", "0.3", "--speed", "5", "--quiet"]


def _run(argv, capsys):
    code = main(argv)
    out = capsys.readouterr()
    assert "Traceback" not in out.err and "Traceback" not in out.out
    return code, out.err


def _bench(tmp_path: Path, demo_text: str, old: str, new: str, name: str = "bench.toml") -> Path:
    assert old in demo_text, f"test setup: {old!r} not in the demo bench file"
    path = tmp_path / name
    path.write_text(demo_text.replace(old, new, 1), encoding="utf-8")
    return path


# --------------------------------------------------------------------------------------------
# --set cannot switch the guard off: the same bounds as in the file, named with the override

GUARD_OVERRIDES = [
    ("guard.stale_after=1e9s", '"1e9s" is above 5 s'),
    ("guard.comm_failures=100", "100 is outside 1 ... 10"),
    ("guard.mount_temperature_max=5000degC", '"5000degC" is outside -10 degC ... 60 degC'),
    ("guard.mount_temperature_min=-200degC", '"-200degC" is outside -10 degC ... 60 degC'),
    ("guard.current_tolerance=5A", '"5A" is above 1 A'),  # 10 % of the demo diode's 10 A rating
    ("guard.transmission_jump=5", "5.0 is outside 0.01 ... 0.9"),
    ("guard.max_current=11A", "11 A is above pump.diode_current_rating (10 A)"),
    ("sample.upper_state_lifetime=600s", '"600s" is above 0.1 s'),  # the baseline would wait 50 min
    ("pump.beam_diameter=10m", '"10m" is above 0.1 m'),
]


@pytest.mark.parametrize(("override", "expected"), GUARD_OVERRIDES)
def test_record_refuses_out_of_bound_overrides_before_anything_starts(override, expected, tmp_path, capsys):
    code, err = _run([*RECORD, *ARM, "--logs", str(tmp_path), "--set", override], capsys)
    key = override.partition("=")[0]
    assert code == 2
    assert f"--set {key} (over <built-in demo bench>): {expected}" in err
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    ("old", "new", "key", "expected"),
    [
        ('stale_after = "0.5 s"', 'stale_after = "1e9 s"', "guard.stale_after (line 78)", "above 5 s"),
        ("comm_failures = 3", "comm_failures = 100", "guard.comm_failures (line 79)", "outside 1 ... 10"),
        (
            'mount_temperature_max = "35 degC"',
            'mount_temperature_max = "5000 degC"',
            "guard.mount_temperature_max (line 76)",
            "outside -10 degC ... 60 degC",
        ),
        (
            'upper_state_lifetime = "0.6 ms"',
            'upper_state_lifetime = "600 s"',
            "sample.upper_state_lifetime (line 22)",
            "above 0.1 s",
        ),
    ],
)
def test_the_file_gets_the_same_bounds_as_set(demo_text, old, new, key, expected):
    with pytest.raises(ConfigError) as info:
        load_bench_text(demo_text.replace(old, new, 1), "bench.toml")
    assert str(info.value).startswith(f"bench.toml: {key}: ")
    assert expected in str(info.value)


def test_the_demo_values_and_the_test_suites_overrides_stay_within_the_bounds():
    for stale in ("0.5 s", "2 s", "3 s"):  # what the other tests of this suite use
        assert load_bench(overrides={"guard.stale_after": stale}).guard.stale_after == pytest.approx(
            float(stale.split()[0])
        )


# --------------------------------------------------------------------------------------------
# Overrides that lower the eyewear OD


def _od(wavelength, power, diameter) -> int:
    return laser_safety.required_od(wavelength, power, diameter).od_required


@pytest.mark.parametrize(
    "override",
    ["pump.slope_efficiency=1e-6W/A", "pump.beam_diameter=0.09m", "pump.max_current=1A"],
)
def test_overrides_that_lower_the_required_od_are_refused(override, tmp_path, capsys):
    code, err = _run(
        [
            *RECORD,
            "--operator",
            "tester",
            "--eyewear-od",
            "940nm=0",
            "--eyewear-od",
            "1030nm=2",
            "--confirm-setup",
            "--logs",
            str(tmp_path),
            "--set",
            override,
        ],
        capsys,
    )
    assert code == 2
    assert f"--set {override} lowers the eyewear OD required against the pump from OD 4 at 940 nm" in err
    assert "--accept-lower-od" in err
    assert list(tmp_path.iterdir()) == []


def test_the_od_compared_is_the_checklists_own():
    cfg = load_bench(overrides={"pump.slope_efficiency": "0.1 W/A"})
    written = load_bench()
    before = _od(940e-9, written.pump.max_power, written.pump.beam_diameter)
    after = _od(940e-9, cfg.pump.max_power, cfg.pump.beam_diameter)
    assert after < before  # a tenth of the power: log10(10.5) = 1.02 OD less
    (text,) = lowered_eyewear(cfg)
    assert f"from OD {before} at 940 nm" in text and f"to OD {after} at 940 nm" in text


@pytest.mark.parametrize(
    "overrides",
    [
        {},
        {"guard.stale_after": "2 s"},
        {"pump.slope_efficiency": "1.1 W/A"},
        {"pump.beam_diameter": "0.1 mm"},
        {"probe.power": "0.5 mW"},
    ],  # the probe's OD at 1030 nm is 0 already: nothing can lower it
)
def test_overrides_that_keep_or_raise_the_od_pass(overrides):
    assert lowered_eyewear(load_bench(overrides=overrides)) == []


def test_accepted_lower_od_is_loud_and_recorded(tmp_path, capsys):
    code = main(
        [
            *RECORD,
            "--operator",
            "tester",
            "--eyewear-od",
            "940nm=0",
            "--eyewear-od",
            "1030nm=2",
            "--confirm-setup",
            "--logs",
            str(tmp_path),
            "--set",
            "guard.stale_after=3s",
            "--set",
            "pump.slope_efficiency=1e-6W/A",
            "--accept-lower-od",
        ]
    )
    out = capsys.readouterr()
    assert code == 0, out.err
    assert "gainbench: WARNING: --set pump.slope_efficiency=1e-6W/A lowers the eyewear OD" in out.err
    run_id = out.out.strip().splitlines()[-1]
    with RunReader(resolve_run(run_id, tmp_path)) as reader:
        settings_events = [
            e for e in reader.events() if e.kind == "setting" and "--accept-lower-od" in e.text
        ]
    assert len(settings_events) == 1
    assert settings_events[0].who == "tester"
    assert "from OD 4 at 940 nm" in settings_events[0].text


# --------------------------------------------------------------------------------------------
# Eyewear answers


@pytest.mark.parametrize(
    ("flags", "expected"),
    [
        (["940nm=0", "940nm=5"], "940nm was already answered by --eyewear-od '940nm=0'"),
        (["940nm=5", "0.94um=5"], "940nm was already answered"),
        (["940nm=5", "940.01nm=0"], "940nm was already answered"),  # one eyewear item (0.1 nm steps)
        (["940nm=5_0"], "is not a plain number"),
        (["940nm=\u0665"], "is not a plain number"),  # ARABIC-INDIC DIGIT FIVE
        (["940nm=\uff15"], "is not a plain number"),  # FULLWIDTH DIGIT FIVE
        (["940nm=5e0"], "is not a plain number"),
        (["940nm=inf"], "is not a plain number"),
        (["940nm=-1"], "is not a plain number"),
        (["940nm=50"], "above OD 10"),
        (["9\u066440nm=5"], "digits other than 0-9"),  # ARABIC-INDIC DIGIT FOUR
        (["9_40nm=5"], "underscore inside a number"),
        (["940nm=5=6"], "expected one WAVELENGTH=OD"),
    ],
)
def test_record_refuses_odd_or_duplicate_eyewear_answers(flags, expected, tmp_path, capsys):
    argv = [*RECORD, "--operator", "tester", "--confirm-setup", "--logs", str(tmp_path)]
    for f in flags:
        argv += ["--eyewear-od", f]
    code, err = _run(argv, capsys)
    assert code == 2
    assert "--eyewear-od" in err and expected in err
    assert list(tmp_path.iterdir()) == []


#: Characters that make numerals Python's float reads but a person may not read the same way.
_NUMERAL_BITS = st.text(alphabet=st.sampled_from("0123456789._e+- infa\u0665\uff15\u00b2\t"), max_size=7)


@settings(max_examples=300, deadline=None)
@given(st.one_of(_NUMERAL_BITS, st.text(max_size=8)))
def test_an_accepted_od_is_written_in_ascii_digits_and_one_point(text):
    # Python's float reads "5_0", "\u0665", "1e1", " inf" and more: parse_od must take only
    # what a person reads the same way (compared here with str methods, not with the parser)
    try:
        od = parse_od(text)
    except ValueError:
        return
    t = text.strip()
    assert t and set(t) <= set("0123456789.") and t.count(".") <= 1
    assert 0.0 <= od <= OD_MAX
    assert od == float(t)


@settings(max_examples=100, deadline=None)
@given(
    st.integers(min_value=1, max_value=9), st.integers(min_value=0, max_value=9), st.sampled_from(["_", "__"])
)
def test_underscores_in_numerals_are_refused_everywhere(a, b, sep):
    numeral = f"{a}{sep}{b}"
    with pytest.raises(ValueError):
        parse_od(numeral)
    with pytest.raises(ConfigError, match="underscore"):
        parse_quantity(f"{numeral} A", "current", "k")


@settings(max_examples=100, deadline=None)
@given(st.characters(categories=["Nd"]).filter(lambda c: not c.isascii()))
def test_digits_of_other_scripts_are_refused_everywhere(digit):
    with pytest.raises(ValueError):
        parse_od(digit)
    with pytest.raises(ConfigError):
        parse_eyewear_flag(f"940nm={digit}")
    with pytest.raises(ConfigError, match="digits other than 0-9"):
        parse_quantity(f"{digit} mm", "length", "k")


def test_distinct_wavelengths_are_kept():
    ods = parse_eyewear_flags(["940nm=5", "1030nm=2"])
    assert sorted(ods.items()) == [(pytest.approx(940e-9), 5.0), (pytest.approx(1030e-9), 2.0)]


# --------------------------------------------------------------------------------------------
# Tracebacks and hangs that were


def test_safety_bounds_the_beam_diameter_and_power(capsys):
    for option, value, expected in (
        ("--beam-diameter", "1e-300m", "outside 1e-06 m ... 1 m"),
        ("--beam-diameter", "1e300m", "outside 1e-06 m ... 1 m"),
        ("--power", "1e300W", "above 1e+06 W"),
    ):
        argv = {"--wavelength": "940nm", "--power": "1W", "--beam-diameter": "2mm"}
        argv[option] = value
        code, err = _run(["safety", *[x for kv in argv.items() for x in kv]], capsys)
        assert code == 2
        assert f"{option}: " in err and expected in err


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ('n_total = "2.0e20 cm^-3"', 'n_total = "2.0e20 mm^-3"', "sample.n_total (line 21)"),
        ('length = "5 mm"', 'length = "5 m"', "sample.length (line 20)"),
        ('beam_diameter = "0.1 mm"', 'beam_diameter = "1e-200 m"', "probe.beam_diameter (line 41)"),
        (
            'probe_emission = "2.2e-20 cm^2"',
            'probe_emission = "2.2e-2 cm^2"',
            "sample.cross_sections.probe_emission (line 27)",
        ),
    ],
)
def test_check_refuses_what_sample_cannot_compute(old, new, key, tmp_path, demo_text, capsys):
    path = _bench(tmp_path, demo_text, old, new)
    for argv in (["check", str(path)], ["sample", "--config", str(path)]):
        code, err = _run(argv, capsys)
        assert code == 2
        assert f"{path}: {key}: " in err


@pytest.mark.parametrize("speed", ["nan", "inf", "-1", "0"])
def test_record_refuses_a_speed_that_is_not_a_positive_number(speed, tmp_path, capsys):
    code, err = _run([*RECORD[:3], f"--speed={speed}", *ARM, "--logs", str(tmp_path)], capsys)
    assert code == 2
    assert "--speed: " in err
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("command", ["summary", "export", "replay", "report"])
@pytest.mark.parametrize("run_id", ["", "  "])
def test_an_empty_run_id_is_a_clear_error(command, run_id, tmp_path, capsys):
    code, err = _run([command, run_id, "--logs", str(tmp_path)], capsys)
    assert code == 2
    assert "an empty run id" in err


def test_a_runaway_unit_power_in_a_profile_is_refused_at_once(tmp_path, demo_text):
    from drivers.profile import BUILTIN_DIR

    profile = tmp_path / "pump.toml"
    text = (BUILTIN_DIR / "generic-pump.toml").read_text(encoding="utf-8")
    assert 'unit = "degC"' in text
    profile.write_text(text.replace('unit = "degC"', 'unit = "9**9**9 A"', 1), encoding="utf-8")
    bench = _bench(tmp_path, demo_text, 'profile = "generic-pump"', f'profile = "{profile.as_posix()}"')
    # in a child process: before the fix pint evaluated 9**9**9 and never returned
    proc = subprocess.run(
        [sys.executable, "-P", "-m", "bench", "check", str(bench)], capture_output=True, text=True, timeout=60
    )
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "instruments.pump.profile (line 63)" in proc.stderr
    assert "commands.mount_temperature.unit: '9**9**9 A' is not a unit this tool reads" in proc.stderr


# --------------------------------------------------------------------------------------------
# check refuses every instrument mistake record would

INSTRUMENT_MISTAKES = [
    (
        'driver = "digitiser"',
        'driver = "digitizer"',
        "instruments.detector.driver (line 54)",
        "unknown driver 'digitizer'",
    ),
    (
        'driver = "pump-driver"',
        'driver = "shutter"',
        "instruments.pump.driver (line 61)",
        "driver 'shutter' is for the 'shutter' role, not 'pump'",
    ),
    (
        'profile = "generic-pump"',
        'profile = "generic-pmp"',
        "instruments.pump.profile (line 63)",
        "no built-in profile of that name",
    ),
    (
        'profile = "generic-pump"',
        'profile = "qs2-shutter"',
        "instruments.pump.profile (line 63)",
        "this profile is for the 'shutter' role but is used for the 'pump' role",
    ),
    (
        'sample_rate = "100 kHz"',
        'sample_rate = "-5 Hz"',
        "instruments.detector.options.sample_rate (line 58)",
        "'-5 Hz' is not positive",
    ),
    (
        'sample_rate = "100 kHz"',
        'sample_rate = "5 MHz"',
        "instruments.detector.options.sample_rate (line 58)",
        "expected 1 Hz ... 2 MHz",
    ),  # the simulated digitiser's own limit
    ('range = "2 V"', 'range = "0 V"', "instruments.detector.options.range (line 58)", "is not positive"),
    (
        'format = "binary"',
        'format = "hex"',
        "instruments.detector.options.format (line 58)",
        "'hex' is not one of ['binary', 'ascii']",
    ),
    (
        'format = "binary"',
        'format = "binary", colour = 1',
        "instruments.detector.options.colour (line 58)",
        "unknown option for the digitiser driver",
    ),
]


@pytest.mark.parametrize(("old", "new", "key", "expected"), INSTRUMENT_MISTAKES)
def test_check_and_record_refuse_instrument_mistakes_alike(
    old, new, key, expected, tmp_path, demo_text, capsys
):
    path = _bench(tmp_path, demo_text, old, new)
    logs = tmp_path / "logs"
    for argv in (["check", str(path)], [*RECORD, "--config", str(path), *ARM, "--logs", str(logs)]):
        code, err = _run(argv, capsys)
        assert code == 2, argv
        assert f"{path}: {key}: " in err and expected in err, err
    assert not logs.exists() or list(logs.iterdir()) == []


def test_the_demo_bench_passes_the_instrument_check():
    check_instruments(load_bench())


# --------------------------------------------------------------------------------------------
# A folder named "bench" in the current directory


def test_record_in_a_folder_holding_a_decoy_bench_package(tmp_path):
    decoy = tmp_path / "bench"
    decoy.mkdir()
    (decoy / "__init__.py").write_text('raise SystemExit("the decoy bench package was imported")\n')
    (decoy / "__main__.py").write_text('raise SystemExit("the decoy bench package was run")\n')
    gainbench = Path(sys.executable).with_name("gainbench")
    assert gainbench.exists(), "test setup: the gainbench script is installed beside the interpreter"
    proc = subprocess.run(
        [str(gainbench), *RECORD, *ARM, "--set", "guard.stale_after=3s", "--logs", str(tmp_path / "logs")],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 0, proc.stderr
    assert "decoy" not in proc.stderr
    assert len(list((tmp_path / "logs").iterdir())) == 1


# --------------------------------------------------------------------------------------------
# Whatever passes check, sample and the checklist can compute


def _log_uniform(lo: float, hi: float):
    import math

    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0**e)


@settings(max_examples=150, deadline=None)
@given(
    length=_log_uniform(1e-6, 100.0),
    n_total=_log_uniform(1e18, 1e29),
    sigma_e=_log_uniform(1e-28, 1e-18),
    sigma_a=_log_uniform(1e-28, 1e-18),
    sigma_pump=_log_uniform(1e-28, 1e-18),
    tau=_log_uniform(1e-9, 0.1),
    probe_d=_log_uniform(1e-6, 0.1),
    pump_d=_log_uniform(1e-6, 0.1),
    probe_power=_log_uniform(1e-9, 10.0),
    slope=_log_uniform(1e-6, 100.0),
)
def test_every_bench_that_passes_check_gives_its_figures(
    length, n_total, sigma_e, sigma_a, sigma_pump, tau, probe_d, pump_d, probe_power, slope
):
    import math

    from bench.commands.sample import figures
    from bench.safety.checklist import checklist_items

    text = builtin_bench_path().read_text(encoding="utf-8")
    for old, new in (
        ('length = "5 mm"', f'length = "{length!r} m"'),
        ('n_total = "2.0e20 cm^-3"', f'n_total = "{n_total!r} m^-3"'),
        ('probe_emission = "2.2e-20 cm^2"', f'probe_emission = "{sigma_e!r} m^2"'),
        ('probe_absorption = "0.12e-20 cm^2"', f'probe_absorption = "{sigma_a!r} m^2"'),
        ('pump_absorption = "1.0e-20 cm^2"', f'pump_absorption = "{sigma_pump!r} m^2"'),
        ('upper_state_lifetime = "0.6 ms"', f'upper_state_lifetime = "{tau!r} s"'),
        ('beam_diameter = "0.1 mm"', f'beam_diameter = "{probe_d!r} m"'),
        ('beam_diameter = "0.2 mm"', f'beam_diameter = "{pump_d!r} m"'),
        ('power = "1 mW"', f'power = "{probe_power!r} W"'),
        ('slope_efficiency = "1.05 W/A"', f'slope_efficiency = "{slope!r} W/A"'),
    ):
        assert old in text
        text = text.replace(old, new, 1)
    try:
        cfg = load_bench_text(text, "bench.toml")
    except ConfigError:
        return  # refused with a message: fine (e.g. an optical depth above the bound)
    values = figures(cfg)  # before the bounds: OverflowError, ZeroDivisionError, ValueError
    assert all(isinstance(v, float) and not math.isnan(v) for v in values.values())
    checklist_items(cfg)


def test_the_benchmarks_fresh_process_ignores_a_decoy_bench_package(tmp_path, monkeypatch):
    from bench.performance import in_fresh_process

    decoy = tmp_path / "bench"
    decoy.mkdir()
    (decoy / "__init__.py").write_text('raise SystemExit("the decoy bench package was imported")\n')
    (decoy / "benchmark.py").write_text('raise SystemExit("the decoy bench package was imported")\n')
    monkeypatch.chdir(tmp_path)
    # no rates to try: the fresh process imports bench.performance, calls it, returns at once
    assert in_fresh_process("highest_rate", str(tmp_path), [], 0.1, report=lambda line: None) == [None, []]


def test_live_refuses_the_same_before_the_dashboard_starts(tmp_path, demo_text, capsys):
    logs = ["--logs", str(tmp_path / "logs")]
    for argv, expected in (
        (["live", *logs, "--set", "pump.slope_efficiency=1e-6W/A"], "lowers the eyewear OD required"),
        (
            ["live", *logs, "--set", "guard.comm_failures=100"],
            "--set guard.comm_failures (over <built-in demo bench>): 100 is outside 1 ... 10",
        ),
        (["live", *logs, "--speed", "nan"], "--speed: nan"),
        (["live", *logs, "--current-step", "inf"], "--current-step: inf"),
        (
            [
                "live",
                *logs,
                "--config",
                str(_bench(tmp_path, demo_text, 'driver = "digitiser"', 'driver = "x"')),
            ],
            "instruments.detector.driver (line 54): unknown driver 'x'",
        ),
    ):
        code, err = _run(argv, capsys)
        assert code == 2, argv
        assert expected in err
    assert not (tmp_path / "logs").exists()


def test_sim_serve_refuses_instrument_mistakes(tmp_path, demo_text, capsys):
    path = _bench(tmp_path, demo_text, 'sample_rate = "100 kHz"', 'sample_rate = "5 MHz"')
    code, err = _run(["sim", "serve", "--config", str(path)], capsys)
    assert code == 2
    assert f"{path}: instruments.detector.options.sample_rate (line 58): " in err


def test_a_bench_file_that_never_ends_is_refused(tmp_path, capsys):
    big = tmp_path / "big.toml"
    big.write_bytes(b"# " + b"x" * 2_000_000 + b"\n")
    paths = [big] + ([Path("/dev/zero")] if Path("/dev/zero").exists() else [])  # /dev/zero: POSIX only
    for path in paths:
        code, err = _run(["check", str(path)], capsys)
        assert code == 2
        assert f"{path}: larger than 1000 kB" in err


def _demo_keys() -> list[str]:
    import tomllib

    keys: list[str] = []

    def walk(node: dict, prefix: str) -> None:
        for k, v in node.items():
            if isinstance(v, dict):
                walk(v, f"{prefix}{k}.")
            elif not isinstance(v, list):
                keys.append(f"{prefix}{k}")

    walk(tomllib.loads(builtin_bench_path().read_text(encoding="utf-8")), "")
    return keys


#: Values at the edges of floats and of units, typed as a user might through --set.
ODD_VALUES = [
    "0",
    "-1",
    "-0",
    "nan",
    "inf",
    "1e308",
    "1e400 m",
    "2**64",
    "5_0",
    "",
    "abc",
    "true",
    "0 s",
    "1e-30 s",
    "5 kg",
    "1e300 W",
    "1e300 A",
    "1e300 W/A",
    "1e300 m",
    "1e300 m^-3",
    "1e300 m^2",
    "1e-300 m",
    "1e-300 m^2",
    "1e-300 W",
    "1e-300 A",
    "1e300 Hz",
    "1e300 V",
    "1e6 K",
    "-40 degC",
    "0 degC",
    "1e-9 s",
    "30 um",
    "100 m",
    "0.1 s",
]


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(_demo_keys()), st.sampled_from(ODD_VALUES))
@example("pump.slope_efficiency", "1e300 W/A")
@example("probe.power", "1e300 W")  # once an overflowing photon flux in `gainbench sample`
@example("pump.max_current", "1e300 A")
def test_any_odd_override_is_refused_or_computes(key, value):
    import math

    from bench.commands.sample import figures
    from bench.safety.checklist import checklist_items

    try:
        cfg = load_bench(overrides={key: value})
        check_instruments(cfg)
        lowered_eyewear(cfg)
    except ConfigError:
        return
    checklist_items(cfg)  # before the slope efficiency's bound: "1e300 W/A" gave an infinite intensity
    assert all(not math.isnan(v) for v in figures(cfg).values())


def test_the_terminal_checklist_re_asks_odd_numerals():
    from bench.safety.checklist import checklist_items
    from bench.safety.checklist_answers import run_interactive

    replies = iter(["5_0", "\u0665", "1e1", "50", "5", "2", "yes", "yes", "yes"])
    asked: list[str] = []
    shown: list[str] = []

    def input_fn(question: str) -> str:
        asked.append(question)
        return next(replies)

    answers = run_interactive(checklist_items(load_bench()), input_fn, shown.append, operator="ana")
    assert len(asked) == 9  # four odd numerals re-asked at 940 nm, then the answers that count
    assert answers["eyewear@940nm"].value == 5.0 and answers["eyewear@1030nm"].value == 2.0
    assert sum("Please enter the OD printed on your eyewear" in s for s in shown) == 4
    assert any("'5_0' is not a plain number" in s for s in shown)


def test_check_refuses_ascii_data_from_a_profile_without_an_ascii_fetch(tmp_path, demo_text, capsys):
    from drivers.profile import BUILTIN_DIR

    text = (BUILTIN_DIR / "generic-digitiser.toml").read_text(encoding="utf-8")
    line = next(x for x in text.splitlines(keepends=True) if x.startswith("fetch_ascii = "))
    profile = tmp_path / "no-ascii.toml"
    profile.write_text(text.replace(line, "", 1), encoding="utf-8")
    path = _bench(
        tmp_path,
        demo_text.replace('profile = "generic-digitiser"', f'profile = "{profile.as_posix()}"', 1),
        'format = "binary"',
        'format = "ascii"',
    )
    code, err = _run(["check", str(path)], capsys)
    assert code == 2
    assert f"{path}: instruments.detector.options.format (line 58): profile " in err
    assert "has no ASCII fetch" in err


def test_the_refusal_names_the_overrides_that_lower_the_od():
    # OD exact from bench.safety.exposure_limits.required_od at 940 nm, 7 mm aperture: 8.82 W in 0.2 mm 3.88
    # (OD 4); in 40 mm 2.65 (OD 3); 4.2 W in 0.2 mm 3.56 (OD 4); 8.82 W in 20 mm 3.22 (OD 4);
    # 4.2 W in 20 mm 2.90 (OD 3)
    cfg = load_bench(
        overrides={"guard.stale_after": "2 s", "pump.beam_diameter": "40 mm", "probe.power": "2 mW"}
    )
    (text,) = lowered_eyewear(cfg)
    assert text.startswith(
        "--set pump.beam_diameter=40 mm lowers the eyewear OD required against the pump "
        "from OD 4 at 940 nm (the bench file as written) to OD 3 at 940 nm"
    )
    # neither lowers it alone, both together do
    cfg = load_bench(overrides={"pump.slope_efficiency": "0.5 W/A", "pump.beam_diameter": "20 mm"})
    (text,) = lowered_eyewear(cfg)
    assert text.startswith("--set pump.slope_efficiency=0.5 W/A, pump.beam_diameter=20 mm lowers")
