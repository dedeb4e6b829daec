"""The generic pump driver against a device modelled outside gainbench, with pyvisa-sim.

pyvisa-sim (a general-purpose VISA simulation library) serves the diode driver described in
tests/data/pyvisa_sim/pump.yaml; its replies differ from the simulated bench's, and the
profile tests/data/pyvisa_sim/pump-profile.toml adapts the driver to it, so this checks that
a profile alone is enough to drive another instrument. The setpoint limit (10 A) and the error
queue are enforced by pyvisa-sim itself. 0 degC = 273.15 K is scipy.constants.zero_Celsius.
"""

from __future__ import annotations

import struct
from pathlib import Path

import pytest
from scipy import constants

from drivers.deadline import Deadline
from drivers.errors import InstrumentReportedError, ProfileError, ReplyError
from drivers.registry import open_instrument
from drivers.transports.visa import VisaTransport

pytest.importorskip("pyvisa_sim")

DATA = Path(__file__).parents[1] / "data" / "pyvisa_sim"
BACKEND = f"{DATA / 'pump.yaml'}@sim"
PROFILE = str(DATA / "pump-profile.toml")
CLOSED = "TCPIP::127.0.0.1::5025::SOCKET"
OPEN = "TCPIP::127.0.0.1::5026::SOCKET"


@pytest.fixture
def pump():
    drv = open_instrument("pump", "pump-driver", CLOSED, PROFILE, 2.0, backend=BACKEND)
    drv.reset()
    drv.output(False)
    yield drv
    drv.close()


def test_identity(pump):
    ident = pump.identify()
    assert (ident.maker, ident.model, ident.serial, ident.firmware) == (
        "Test Devices",
        "LDD-10",
        "SN0042",
        "2.1",
    )


def test_setpoint_output_and_readbacks(pump):
    pump.set_current(2.5)
    assert pump.current_setpoint() == pytest.approx(2.5)
    assert pump.output_is_on() is False
    pump.output(True)
    assert pump.output_is_on() is True
    pump.output(False)
    assert pump.output_is_on() is False
    assert pump.interlock_closed() is True
    assert pump.mount_temperature() == pytest.approx(25.0 + constants.zero_Celsius)


def test_out_of_range_setpoint_is_reported_by_the_device(pump):
    pump.set_current(1.0)
    with pytest.raises(InstrumentReportedError) as info:
        pump.set_current(12.0)  # above the device's 10 A maximum
    assert info.value.code == -113 and info.value.text == "Undefined header"
    assert "SOUR:CURR 12.0000" in str(info.value)
    assert pump.current_setpoint() == pytest.approx(1.0)  # unchanged
    assert pump.stats.errors == 1


def test_interlock_open_device():
    drv = open_instrument("pump", "pump-driver", OPEN, PROFILE, 2.0, backend=BACKEND)
    try:
        assert drv.interlock_closed() is False
        assert drv.identify().serial == "SN0043"
        assert drv.mount_temperature() == pytest.approx(31.5 + constants.zero_Celsius)
    finally:
        drv.close()


def test_operation_missing_from_the_profile(pump):
    with pytest.raises(ProfileError, match=r"pump-profile\.toml: commands\.power"):
        pump.power()


def test_generic_pump_profile_does_not_fit_this_device():
    # the generic profile expects OUTP? to answer 1/0; this device answers ON/OFF
    drv = open_instrument("pump", "pump-driver", CLOSED, "generic-pump", 2.0, backend=BACKEND)
    try:
        with pytest.raises(ReplyError, match="1, 0, ON or OFF|boolean") as info:
            drv.interlock_closed()  # "CLOSED" is no boolean
        assert "OUTP:INTL?" in str(info.value) and "CLOSED" in str(info.value)
    finally:
        drv.close()


def test_visa_transport_takes_the_backend_argument():
    t = VisaTransport(CLOSED, backend=BACKEND, timeout_s=1.0)
    try:
        t.write(b"*IDN?\n")
        assert t.read_line(Deadline(1.0)) == b"Test Devices,LDD-10,SN0042,2.1"
    finally:
        t.close()


@pytest.mark.parametrize("resource", ["ASRL7::INSTR", "TCPIP::127.0.0.1::5030::SOCKET"])
def test_binary_block_with_line_feeds_over_visa(resource):
    backend = f"{DATA / 'digitiser.yaml'}@sim"
    drv = open_instrument(
        "detector", "digitiser", resource, "generic-digitiser", 2.0, {"channels": [1, 2]}, backend=backend
    )
    try:
        got = drv.fetch(2)
    finally:
        drv.close()
    # the payload's four float32 values, decoded by Python's struct module as the reference
    expected = struct.unpack("<4f", b"\n\n\n\nAAAA\n\x00 ?B\nC\n")
    assert got.first_index == 40 and got.lost == 0
    assert got.data.shape == (2, 2)
    assert got.data.ravel().tolist() == list(expected)
