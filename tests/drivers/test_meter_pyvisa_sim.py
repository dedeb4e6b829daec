"""The meter driver against a device modelled outside gainbench, with pyvisa-sim.

pyvisa-sim (a general-purpose VISA simulation library) serves the two-channel meter of
tests/data/pyvisa_sim/meter.yaml, whose commands differ from the simulated bench's QM-3 (one
channel per command, in millivolts, no read-all); the profile meter-profile.toml adapts the
driver to it, so a profile alone is enough to drive another meter. The averaging limit (256)
and the error queue are pyvisa-sim's. 1 mV = 1e-3 V (BIPM SI Brochure, 9th ed., table 7).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from drivers.errors import InstrumentReportedError
from drivers.registry import open_instrument

pytest.importorskip("pyvisa_sim")

DATA = Path(__file__).parents[1] / "data" / "pyvisa_sim"
BACKEND = f"{DATA / 'meter.yaml'}@sim"
PROFILE = str(DATA / "meter-profile.toml")
RESOURCE = "TCPIP::127.0.0.1::5031::SOCKET"


@pytest.fixture
def meter():
    drv = open_instrument("detector", "meter", RESOURCE, PROFILE, 2.0, backend=BACKEND)
    yield drv
    drv.close()


def test_identity_and_options_from_the_profile(meter):
    ident = meter.identify()
    assert (ident.maker, ident.model, ident.serial) == ("Test Devices", "PDM-2", "SN0107")
    assert meter.channel_names == ("probe", "reference")
    assert meter.poll_rate_hz == pytest.approx(5.0)


def test_reading_channel_by_channel_in_volts(meter):
    ticks = iter(range(10))
    r = meter.read(lambda: float(next(ticks)))
    assert list(r.values) == pytest.approx([0.803125, 0.602375], rel=1e-12)
    assert (r.t_request, r.t_reply, r.t) == (0.0, 1.0, 0.5)


def test_averaging_is_set_and_refused_by_the_device(meter):
    meter.configure(averages=64)
    assert int(meter.session.query("averages")) == 64
    with pytest.raises(InstrumentReportedError) as info:
        meter.configure(averages=300)  # above the device's 256
    assert info.value.code == -113
    assert int(meter.session.query("averages")) == 64  # unchanged
