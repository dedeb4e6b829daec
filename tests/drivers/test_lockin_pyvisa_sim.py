"""The lock-in driver against a device modelled outside gainbench, with pyvisa-sim.

pyvisa-sim (a general-purpose VISA simulation library) serves the lock-in of
tests/data/pyvisa_sim/lockin.yaml, whose commands differ from the simulated bench's QL-7 (X and
Y in millivolts, DC inputs in millivolts, no R-theta reading, a TAU command); the profile
lockin-profile.toml adapts the driver to it. The time-constant limits and the error queue are
pyvisa-sim's. 1 mV = 1e-3 V (BIPM SI Brochure, 9th ed., table 7); R = hypot(X, Y) and
theta = atan2(Y, X) are how a dual-phase lock-in's magnitude and phase follow from its two
outputs (common practice, no source), checked here with the standard library's math. The last
test drives the device through a bench file's ``[bench] visa_library``, with the pump of
bench_devices.yaml beside it, and `gainbench instruments` identifies both.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
import yaml

from bench.cli import main
from drivers.errors import InstrumentReportedError
from drivers.registry import open_instrument

pytest.importorskip("pyvisa_sim")

DATA = Path(__file__).parents[1] / "data" / "pyvisa_sim"
BACKEND = f"{DATA / 'lockin.yaml'}@sim"
PROFILE = str(DATA / "lockin-profile.toml")
RESOURCE = "TCPIP::127.0.0.1::5032::SOCKET"


@pytest.fixture
def lockin():
    drv = open_instrument("detector", "lockin", RESOURCE, PROFILE, 2.0, backend=BACKEND)
    yield drv
    drv.close()


def test_identity_and_options_from_the_profile(lockin):
    ident = lockin.identify()
    assert (ident.maker, ident.model, ident.serial) == ("Test Devices", "LIA-2", "SN0211")
    assert lockin.poll_rate_hz == pytest.approx(10.0)
    assert lockin.aux_number("reference_dc") == 2


def test_x_and_y_in_volts_stamped_at_request_and_reply(lockin):
    ticks = iter(range(10))
    r = lockin.read(lambda: float(next(ticks)))
    assert (r.x, r.y) == pytest.approx((0.15e-3, -0.042e-3), rel=1e-12)
    assert r.overload is False
    assert (r.t_request, r.t_reply) == (0.0, 1.0)


def test_r_and_theta_from_x_and_y_without_an_r_theta_command(lockin):
    r, theta = lockin.read_r_theta()
    assert r == pytest.approx(math.hypot(0.15e-3, -0.042e-3), rel=1e-12)
    assert theta == pytest.approx(math.atan2(-0.042, 0.15), rel=1e-12)


def test_reference_and_dc_inputs(lockin):
    assert lockin.reference_frequency() == pytest.approx(25.0)
    assert lockin.read_aux("probe_dc") == pytest.approx(0.803125, rel=1e-12)
    assert lockin.read_aux(2) == pytest.approx(0.602375, rel=1e-12)


def test_time_constant_is_set_and_refused_by_the_device(lockin):
    lockin.set_time_constant(0.3)
    assert lockin.time_constant() == pytest.approx(0.3)
    with pytest.raises(InstrumentReportedError) as info:
        lockin.set_time_constant(5000.0)  # above the device's 3000 s
    assert info.value.code == -113
    assert lockin.time_constant() == pytest.approx(0.3)  # unchanged


def test_operations_the_profile_lacks_are_named(lockin):
    with pytest.raises(Exception, match="filter_order"):
        lockin.set_filter_order(2)


def test_instruments_identifies_the_lockin_through_the_bench_files_library(tmp_path, monkeypatch, capsys):
    from drivers.transports import visa

    monkeypatch.setattr(visa, "_MANAGERS", {})  # no ResourceManager of an earlier test
    devices = yaml.safe_load((DATA / "bench_devices.yaml").read_text(encoding="utf-8"))
    lockin_file = yaml.safe_load((DATA / "lockin.yaml").read_text(encoding="utf-8"))
    devices["devices"].update(lockin_file["devices"])
    devices["resources"].update(lockin_file["resources"])
    (tmp_path / "devices.yaml").write_text(yaml.safe_dump(devices), encoding="utf-8")
    bench = Path(__file__).parents[2] / "bench" / "data" / "demo_lockin_bench.toml"
    text = bench.read_text(encoding="utf-8").replace(
        "simulated = true", 'simulated = false\nvisa_library = "devices.yaml@sim"', 1
    )
    text = text[: text.index("[instruments.shutter]")] + text[text.index("[guard]") :]
    text = text.replace('resource = "simulated"', f'resource = "{RESOURCE}"', 1)
    text = text.replace('resource = "simulated"', 'resource = "TCPIP::127.0.0.1::5025::SOCKET"', 1)
    text = text.replace('profile = "generic-lockin"', f'profile = "{Path(PROFILE).as_posix()}"', 1)
    text = text.replace(
        'profile = "generic-pump"', f'profile = "{(DATA / "pump-profile.toml").as_posix()}"', 1
    )
    (tmp_path / "bench.toml").write_text(text, encoding="utf-8")
    assert main(["instruments", "--config", str(tmp_path / "bench.toml"), "--no-scan"]) == 0
    out = capsys.readouterr().out
    assert "Test Devices, LIA-2, serial SN0211, firmware 2.1" in out, out
    assert "Test Devices, LDD-10, serial SN0042, firmware 2.1" in out, out
    assert "lockin via" in out and "not reached" not in out, out
