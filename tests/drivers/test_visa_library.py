"""``[bench] visa_library``: which VISA library a bench's VISA instruments open through.

The instruments here are served by pyvisa-sim (a general-purpose VISA simulation library) from
tests/data/pyvisa_sim/bench_devices.yaml, a device file written for these tests: its pump
speaks other commands than the generic pump profile (it is driven with pump-profile.toml), so
identifying it through the command line checks the bench file, the library choice, the
profile and the driver together. The identities expected are the ones that file serves; the
library's words are checked against the installed distributions' own metadata
(`importlib.metadata`), and what reaches pyvisa is recorded at ``pyvisa.ResourceManager``
itself. The specification forms ("@py", "", "path@sim") are pyvisa's
(`pyvisa.highlevel.open_visa_library`).
"""

from __future__ import annotations

import shutil
from importlib import metadata
from pathlib import Path

import pytest

pyvisa = pytest.importorskip("pyvisa")
pytest.importorskip("pyvisa_sim")

from cli_flags import ARM  # noqa: E402

from bench.cli import main  # noqa: E402
from bench.config import builtin_bench_path, load_bench, load_bench_text  # noqa: E402
from bench.errors import ConfigError  # noqa: E402
from bench.store import RunReader  # noqa: E402
from bench.store.schema import SUFFIX  # noqa: E402
from drivers.registry import open_instrument, visa_library_of  # noqa: E402
from drivers.transports import visa  # noqa: E402

DATA = Path(__file__).parents[1] / "data" / "pyvisa_sim"
DEVICES = DATA / "bench_devices.yaml"
PUMP_PROFILE = DATA / "pump-profile.toml"
PUMP = "TCPIP::127.0.0.1::5025::SOCKET"
DETECTOR = "TCPIP::127.0.0.1::5030::SOCKET"
REAL_RESOURCE_MANAGER = pyvisa.ResourceManager


@pytest.fixture(autouse=True)
def fresh_managers(monkeypatch):
    """Each test starts with no ResourceManager of gainbench's own open."""
    monkeypatch.setattr(visa, "_MANAGERS", {})


def bench_text(library_line: str | None) -> str:
    """The demo bench made real: its detector and pump at the device file's resources, no
    shutter; ``library_line`` (e.g. ``visa_library = "@py"``) goes into [bench]."""
    text = builtin_bench_path().read_text(encoding="utf-8")
    text = text.replace("simulated = true", "simulated = false", 1)
    start = text.index("[instruments.shutter]")
    text = text[:start] + text[text.index("[guard]") :]
    resources = iter([f'resource = "{DETECTOR}"', f'resource = "{PUMP}"'])
    while 'resource = "simulated"' in text:
        text = text.replace('resource = "simulated"', next(resources), 1)
    text = text.replace('profile = "generic-pump"', f'profile = "{PUMP_PROFILE.as_posix()}"', 1)
    if library_line is not None:
        text = text.replace("simulated = false\n", f"simulated = false\n{library_line}\n", 1)
    return text


@pytest.fixture
def sim_bench(tmp_path, monkeypatch):
    """A bench file whose library is the device file, named relative to the bench file's own
    folder, with the working directory somewhere else."""
    folder = tmp_path / "lab"
    (folder / "devices").mkdir(parents=True)
    shutil.copy(DEVICES, folder / "devices" / "bench.yaml")
    path = folder / "bench.toml"
    path.write_text(bench_text('visa_library = "devices/bench.yaml@sim"'), encoding="utf-8")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    return path


def record_calls(monkeypatch, serve=DEVICES):
    """Record the arguments pyvisa.ResourceManager is called with; serve from ``serve``."""
    calls = []

    def recording(*args):
        calls.append(args)
        return REAL_RESOURCE_MANAGER(f"{serve}@sim")

    monkeypatch.setattr(pyvisa, "ResourceManager", recording)
    return calls


def line_number(path: Path, starts: str) -> int:
    lines = path.read_text(encoding="utf-8").splitlines()
    return next(i for i, line in enumerate(lines, start=1) if line.startswith(starts))


def sim_words(path: Path) -> str:
    return f"pyvisa-sim {metadata.version('pyvisa-sim')} serving {path.resolve()}"


# -- the default and the vendor choice ----------------------------------------------------------


def test_the_default_library_is_pyvisa_py(tmp_path, monkeypatch, capsys):
    assert load_bench().visa_library == "@py"
    path = tmp_path / "bench.toml"
    path.write_text(bench_text(None), encoding="utf-8")
    assert load_bench(path).visa_library == "@py"
    calls = record_calls(monkeypatch)
    assert main(["instruments", "--config", str(path), "--no-scan"]) == 0
    assert calls == [("@py",)]  # one manager for both instruments and the library line
    assert "VISA library ('@py')" in capsys.readouterr().out


def test_open_instrument_without_a_library_asks_pyvisa_for_pyvisa_py(monkeypatch):
    calls = record_calls(monkeypatch)
    with open_instrument("pump", "pump-driver", PUMP, str(PUMP_PROFILE), 2.0) as drv:
        assert drv.identify().serial == "SN0042"
    assert calls == [("@py",)]


def test_the_vendor_choice_is_pyvisas_own_default(tmp_path, monkeypatch, capsys):
    path = tmp_path / "bench.toml"
    path.write_text(bench_text('visa_library = ""'), encoding="utf-8")
    assert load_bench(path).visa_library == ""
    calls = record_calls(monkeypatch)
    assert main(["instruments", "--config", str(path), "--no-scan"]) == 0
    assert calls == [()]  # pyvisa.ResourceManager() with no argument: pyvisa picks the library
    out = capsys.readouterr().out
    assert "VISA library (''): " + sim_words(DEVICES) in out
    assert "Test Devices, LDD-10, serial SN0042, firmware 2.1" in out


# -- a device file through the bench file ---------------------------------------------------------


def test_instruments_identifies_each_through_the_bench_files_library(sim_bench, capsys):
    assert main(["instruments", "--config", str(sim_bench)]) == 0
    out = capsys.readouterr().out
    served = sim_bench.parent / "devices" / "bench.yaml"
    assert f"VISA library ('{served.resolve()}@sim'): {sim_words(served)}" in out
    listing = out[out.index("VISA resources") : out.index("Serial ports")]
    # pyvisa-sim names its resources with the board number 0 (pyvisa's normalised form)
    assert "TCPIP0::127.0.0.1::5025::SOCKET" in listing and "TCPIP0::127.0.0.1::5030::SOCKET" in listing
    assert "Test Devices, LDD-10, serial SN0042, firmware 2.1" in out
    assert "Test Devices, DG-2, serial SN0102, firmware 1.0" in out
    assert "not reached" not in out


def test_a_relative_library_path_travels_with_the_overrides(sim_bench, tmp_path, monkeypatch):
    cfg = load_bench(sim_bench)
    served = str((sim_bench.parent / "devices" / "bench.yaml").resolve()) + "@sim"
    assert cfg.visa_library == served
    # a bench process reads only the text and the overrides, from its own working directory
    monkeypatch.chdir(tmp_path)
    again = load_bench_text(cfg.text, cfg.source, overrides=cfg.overrides)
    assert again.visa_library == served


def test_the_command_line_option_overrides_the_bench_file(sim_bench, capsys):
    code = main(["instruments", "--config", str(sim_bench), "--no-scan", "--visa-backend", f"{DEVICES}@sim"])
    assert code == 0
    out = capsys.readouterr().out
    assert sim_words(DEVICES) in out and "SN0042" in out


def test_one_resource_manager_per_library(monkeypatch):
    calls = record_calls(monkeypatch)
    first = visa.VisaTransport(PUMP, backend="@py", timeout_s=1.0)
    second = visa.VisaTransport(DETECTOR, backend="@py", timeout_s=1.0)
    try:
        assert first._rm is second._rm
        assert calls == [("@py",)]
    finally:
        first.close()
        second.close()
    rm = first._rm
    visa.close_resource_managers()
    with pytest.raises(pyvisa.errors.InvalidSession):  # pyvisa's own word for a closed manager
        _ = rm.session
    third = visa.VisaTransport(PUMP, backend="@py", timeout_s=1.0)  # a new one, opened on demand
    try:
        assert calls == [("@py",), ("@py",)] and third._rm is not rm
    finally:
        third.close()


def test_a_driver_says_which_library_it_went_through():
    with open_instrument(
        "pump", "pump-driver", PUMP, str(PUMP_PROFILE), 2.0, backend=f"{DEVICES}@sim"
    ) as drv:
        assert visa_library_of(drv) == sim_words(DEVICES)


# -- bad values ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "value, expected",
    [
        (
            "devices/missing.yaml@sim",
            "no such file {folder}/devices/missing.yaml (expected a pyvisa-sim device file",
        ),
        (
            "devices/bench.yaml@nosuchbackend",
            "unknown VISA backend '@nosuchbackend' (no package pyvisa_nosuchbackend",
        ),
        ("libvisa-missing.so", "no such file {folder}/libvisa-missing.so (expected a VISA library file"),
        ("devices/bench.yaml@py", "pyvisa-py takes no file"),
        ("devices/bench.yaml@s/m", "names a pyvisa backend (py, sim, ivi), not 's/m'"),
        (" @py", "has spaces around it"),
    ],
)
@pytest.mark.parametrize("command", ["instruments", "check"])
def test_a_bad_library_is_a_clear_error(sim_bench, value, expected, command, capsys):
    text = sim_bench.read_text(encoding="utf-8").replace(
        'visa_library = "devices/bench.yaml@sim"', f'visa_library = "{value}"'
    )
    sim_bench.write_text(text, encoding="utf-8")
    argv = (
        ["instruments", "--config", str(sim_bench)] if command == "instruments" else ["check", str(sim_bench)]
    )
    assert main(argv) == 2
    out = capsys.readouterr()
    line = line_number(sim_bench, "visa_library")
    where = f"{sim_bench}: bench.visa_library (line {line}): "
    assert out.err.startswith(f"gainbench: error: {where}")
    assert expected.format(folder=sim_bench.parent.resolve()) in out.err
    assert "Traceback" not in out.err and out.out == ""


def test_a_bad_library_given_with_set_is_named_as_such(sim_bench):
    with pytest.raises(
        ConfigError, match=r"--set bench\.visa_library \(over .*\): no such file .*nowhere\.yaml"
    ):
        load_bench(sim_bench, overrides={"bench.visa_library": "nowhere.yaml@sim"})


def test_an_instruments_own_library_must_not_contradict_the_benchs(sim_bench):
    text = sim_bench.read_text(encoding="utf-8").replace(
        f'profile = "{PUMP_PROFILE.as_posix()}"',
        f'profile = "{PUMP_PROFILE.as_posix()}"\noptions = {{ visa_backend = "@py" }}',
    )
    sim_bench.write_text(text, encoding="utf-8")
    line = line_number(sim_bench, "options = { visa_backend")
    with pytest.raises(ConfigError) as info:
        load_bench(sim_bench)
    assert f"instruments.pump.options (line {line}): visa_backend = '@py' differs from" in str(info.value)


def test_the_library_stays_unresolved_where_there_is_no_file():
    for value in ("@py", "", "@sim", "@ivi"):
        text = bench_text(f'visa_library = "{value}"')
        assert load_bench_text(text, "t.toml").visa_library == value


# -- a run keeps the library ------------------------------------------------------------------------


def test_record_stores_the_library_beside_the_identities(tmp_path, capsys):
    argv = ["record", "--seconds", "0.3", "--speed", "5", "--quiet", *ARM, "--logs", str(tmp_path)]
    assert main(argv) == 0
    capsys.readouterr()
    (path,) = tmp_path.glob(f"*{SUFFIX}")  # the one run this test made
    with RunReader(path) as run:
        meta = run.meta
    words = f"pyvisa-py {metadata.version('pyvisa-py')}"
    # the simulated bench's detector and pump are TCPIP SOCKET resources; its shutter is serial
    assert meta["visa_library"] == {"detector": words, "pump": words}
    assert set(meta["instruments"]) == {"detector", "pump", "shutter"}
