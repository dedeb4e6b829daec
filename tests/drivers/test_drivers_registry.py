"""Driver and transport registries, the error chokepoint, deadlines and driver options."""

from __future__ import annotations

import time

import pytest
import serial
from pyvisa import constants
from pyvisa import errors as visa_errors

from bench.errors import ConfigError, GainbenchError
from drivers import registry
from drivers.deadline import Deadline
from drivers.errors import (
    ConnectionLost,
    InstrumentError,
    InstrumentTimeout,
    InterfaceUnavailable,
    ProfileError,
    ReplyError,
    translate_transport_error,
)
from drivers.registry import known_drivers, open_instrument, register_unavailable
from drivers.transports.base import available_transports, transport_kind


def test_builtin_drivers_are_registered_with_their_roles():
    drivers = known_drivers()
    roles = {name: info.role for name, info in drivers.items() if info.cls is not None}
    assert roles == {
        "digitiser": "detector",
        "lockin": "detector",
        "meter": "detector",
        "pump-driver": "pump",
        "scope": "detector",
        "shutter": "shutter",
        "wavelength-source": "wavelength",
    }


def test_unknown_driver_lists_the_known_ones():
    with pytest.raises(InstrumentError) as info:
        open_instrument("pump", "laser-thing", "loop://", "generic-pump")
    message = str(info.value)
    assert "unknown driver 'laser-thing'" in message
    for name in ("digitiser", "pump-driver", "shutter", "wavelength-source"):
        assert name in message


def test_unavailable_driver_says_what_to_install(monkeypatch):
    monkeypatch.setattr(registry, "_DRIVERS", dict(registry._DRIVERS))  # undone after the test
    register_unavailable("fancy-camera", "detector", "needs the camera SDK: pip install some-sdk")
    with pytest.raises(InterfaceUnavailable, match="pip install some-sdk"):
        open_instrument("detector", "fancy-camera", "loop://", "generic-digitiser")


def test_simulated_resource_must_be_resolved_first():
    with pytest.raises(InstrumentError, match="simulated bench"):
        open_instrument("pump", "pump-driver", "simulated", "generic-pump")


def test_profile_of_another_role_is_refused():
    with pytest.raises(ProfileError, match="'detector' role but is used for the 'pump' role"):
        open_instrument("pump", "pump-driver", "loop://", "generic-digitiser")


def test_unknown_option_names_the_key():
    with pytest.raises(ConfigError, match=r"instruments\.detector\.options\.colour: unknown option"):
        open_instrument("detector", "digitiser", "loop://", "generic-digitiser", 0.5, {"colour": "red"})


def test_options_with_units_become_si():
    drv = open_instrument(
        "detector",
        "digitiser",
        "loop://",
        "generic-digitiser",
        0.5,
        {"sample_rate": "100 kHz", "range": "2000 mV", "format": "ascii"},
    )
    try:
        assert drv.rate_hz == pytest.approx(1e5) and drv.range_v == pytest.approx(2.0)
        assert drv.data_format == "ascii"
    finally:
        drv.close()
    with pytest.raises(ConfigError, match=r"options\.sample_rate"):
        open_instrument("detector", "digitiser", "loop://", "generic-digitiser", 0.5, {"sample_rate": "5 V"})
    with pytest.raises(ConfigError, match=r"options\.format"):
        open_instrument("detector", "digitiser", "loop://", "generic-digitiser", 0.5, {"format": "hex"})


@pytest.mark.parametrize(
    "resource, kind",
    [
        ("TCPIP::127.0.0.1::5025::SOCKET", "visa"),
        ("TCPIP0::192.168.0.5::inst0::INSTR", "visa"),
        ("ASRL/dev/ttyUSB0::INSTR", "visa"),
        ("ASRL3::INSTR", "visa"),
        ("USB0::0x1234::0x5678::SN1::INSTR", "visa"),
        ("GPIB0::12::INSTR", "visa"),
        ("COM3", "serial"),
        ("/dev/ttyUSB0", "serial"),
        ("socket://127.0.0.1:7001", "serial"),
        ("loop://", "serial"),
    ],
)
def test_transport_kind_from_resource(resource, kind):
    # resource forms: VISA specification VPP-4.3 section 4.3.1 (resource names), from memory;
    # pyserial URL handlers (pyserial documentation, "URL Handlers")
    assert transport_kind(resource) == kind


@pytest.mark.parametrize("resource", ["", "printer", "127.0.0.1:5025"])
def test_unknown_resource_form(resource):
    with pytest.raises(ValueError, match="resource"):
        transport_kind(resource)


def test_missing_visa_backend_package_says_what_to_install():
    pytest.importorskip("pyvisa_py")
    try:
        import usb  # noqa: F401
    except ImportError:
        pass
    else:
        pytest.skip("PyUSB is installed here")
    with pytest.raises(InterfaceUnavailable, match="(?i)install.*PyUSB"):
        open_instrument("pump", "pump-driver", "USB0::0x1234::0x5678::SN1::INSTR", "generic-pump", 0.5)


def test_both_transports_available():
    assert available_transports() == {"serial": "", "visa": ""}


# -- the chokepoint -----------------------------------------------------------------------

CTX = {"role": "pump", "resource": "TCPIP::127.0.0.1::5025::SOCKET", "command": b"MEAS:CURR?\n"}


@pytest.mark.parametrize(
    "exc, kind",
    [
        (visa_errors.VisaIOError(constants.StatusCode.error_timeout), InstrumentTimeout),
        (visa_errors.VisaIOError(constants.StatusCode.error_connection_lost), ConnectionLost),
        (visa_errors.VisaIOError(constants.StatusCode.error_io), ConnectionLost),
        (serial.SerialTimeoutException("Write timeout"), InstrumentTimeout),
        (serial.SerialException("socket disconnected"), ConnectionLost),
        (TimeoutError("timed out"), InstrumentTimeout),
        (ConnectionResetError(104, "Connection reset by peer"), ConnectionLost),
        (BrokenPipeError(32, "Broken pipe"), ConnectionLost),
        (visa_errors.LibraryError("no library"), InterfaceUnavailable),
    ],
)
def test_transport_exceptions_become_typed_errors(exc, kind):
    err = translate_transport_error(exc, **CTX)
    assert type(err) is kind
    assert isinstance(err, GainbenchError)
    message = str(err)
    assert "pump instrument (TCPIP::127.0.0.1::5025::SOCKET)" in message
    assert "MEAS:CURR?" in message


def test_instrument_errors_get_missing_context_only():
    err = ReplyError("expected one number", reply=b"x" * 500)
    out = translate_transport_error(err, **CTX)
    assert out is err and err.role == "pump"
    message = str(err)
    assert "got b'xxxx" in message and "(500 bytes)" in message
    assert len(message) < 300  # the reply is cut to about 80 characters


def test_profile_error_names_file_and_key():
    err = ProfileError("my.toml", "commands.set_current.send", "unknown placeholder {amps}")
    assert str(err) == "command profile my.toml: commands.set_current.send: unknown placeholder {amps}"
    assert isinstance(err, InstrumentError)


# -- deadline -----------------------------------------------------------------------------


def test_deadline_counts_down_on_the_monotonic_clock():
    d = Deadline(0.05)
    assert not d.expired() and 0 < d.time_left() <= 0.05
    while not d.expired():
        time.sleep(0.005)
    assert d.time_left() == 0.0


@pytest.mark.parametrize("bad", [-1.0, float("nan"), float("inf"), "1", True])
def test_deadline_rejects_bad_timeouts(bad):
    with pytest.raises(ValueError, match="timeout_s"):
        Deadline(bad)
