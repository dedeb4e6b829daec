"""The lock-in driver and its profile on bytes: the generic-lockin profile's commands go out as
the text it says, and replies are parsed whole, one byte at a time and with garbage, through
the real session and the shared line buffer. The replies are written by hand here after the
number forms of IEEE Std 488.2-1992 (7.7.2 decimal numeric program data, 8.7 response
formats); nothing is produced by the code under test."""

from __future__ import annotations

import math
from collections.abc import Callable

import pytest

from drivers.errors import DriverConfigError, InstrumentTimeout, ProfileError, ReplyError
from drivers.instruments.lockin import LockIn
from drivers.profile import load_profile, parse_profile
from drivers.registry import check_instrument, known_drivers
from drivers.session import Session
from drivers.transports.line_buffer import LineBuffer


class BytesTransport:
    """In-memory transport: each written line is answered by ``respond``; the reply bytes are
    handed to the line buffer in pieces of ``chunk`` bytes (0: whole)."""

    resource = "bytes://test"

    def __init__(self, respond: Callable[[str], bytes | None], chunk: int = 0) -> None:
        self.respond = respond
        self.chunk = chunk
        self.sent: list[bytes] = []
        self._pending: list[bytes] = []
        self.buffer = LineBuffer(b"\n")

    def write(self, data: bytes) -> None:
        self.sent.append(data)
        reply = self.respond(data.decode("ascii").rstrip("\n"))
        if reply:
            step = self.chunk or len(reply)
            self._pending.extend(reply[i : i + step] for i in range(0, len(reply), step))

    def read_line(self, deadline) -> bytes:
        while True:
            line = self.buffer.next_line()
            if line is not None:
                return line
            if not self._pending:
                raise InstrumentTimeout("no reply", resource=self.resource)
            self.buffer.feed(self._pending.pop(0))

    def read_exact(self, n, deadline) -> bytes:  # pragma: no cover - no block replies here
        raise AssertionError("the lock-in has no block replies")

    def discard_input(self) -> None:
        self._pending.clear()
        self.buffer.clear()

    def reconnect(self) -> None:
        self.discard_input()

    def close(self) -> None:
        pass


class FakeLockIn:
    """Replies written out by hand; ``xy`` may be replaced to send a garbled line."""

    def __init__(self) -> None:
        self.xy = b"1.234E-3,-5.6E-4\n"
        self.tc = 0.1
        self.overload = False

    def __call__(self, text: str) -> bytes | None:
        if text == "*IDN?":
            return b"Loopback Devices,LK-1,0003,0.2\n"
        if text == "SYST:ERR?":
            return b'0,"No error"\n'
        if text == "SNAP:XY?":
            return self.xy
        if text == "SNAP:RTH?":
            return b"1.357E-3,-24.4\n"
        if text == "SNAP:XY?;STAT:OVLD?":
            return self.xy.rstrip(b"\n") + b";1\n"
        if text.startswith("SENS:TCON "):
            self.tc = float(text.split()[1])
            return None
        if text == "SENS:TCON?":
            return f"{self.tc:.6g}\n".encode()
        if text == "SENS:SENS?":
            return b"+5.00000E-03\n"
        if text == "SENS:FILT:ORD?":
            return b"2\n"
        if text == "REF:FREQ?":
            return b"137.000\n"
        if text.startswith("AUX:READ? "):
            return {"1": b"0.80125\n", "2": b"6.0E-1\n"}[text.split()[1]]
        if text == "STAT:OVLD?":
            return b"1\n" if self.overload else b"0\n"
        return None


def make(chunk: int = 0, options=None, fake=None):
    fake = fake or FakeLockIn()
    prof = load_profile("generic-lockin", role="detector")
    transport = BytesTransport(fake, chunk)
    session = Session(prof, transport, role="detector", resource=transport.resource, timeout_s=1.0)
    merged = {**prof.options, **(options or {})}
    return LockIn(session, merged), fake, transport


@pytest.mark.parametrize("chunk", [0, 1, 3])
def test_readings_parse_whole_and_byte_by_byte(chunk):
    drv, fake, transport = make(chunk)
    assert drv.identify().model == "LK-1"
    assert drv.read_xy() == (pytest.approx(1.234e-3), pytest.approx(-5.6e-4))
    r, theta = drv.read_r_theta()
    assert r == pytest.approx(1.357e-3)
    assert theta == pytest.approx(math.radians(-24.4))  # the profile's phase_unit is degrees
    assert drv.sensitivity() == pytest.approx(5e-3)
    assert drv.filter_order() == 2
    assert drv.reference_frequency() == pytest.approx(137.0)
    assert drv.read_aux(1) == pytest.approx(0.80125)
    assert drv.read_aux("reference_dc") == pytest.approx(0.6)
    drv.set_time_constant(0.3)
    assert transport.sent[-2] == b"SENS:TCON 0.3\n"  # then the error queue is drained
    assert transport.sent[-1] == b"SYST:ERR?\n"
    assert drv.time_constant() == pytest.approx(0.3)
    reading = drv.read()
    assert (reading.x, reading.y, reading.overload) == (
        pytest.approx(1.234e-3),
        pytest.approx(-5.6e-4),
        False,
    )
    assert reading.t_request <= reading.t <= reading.t_reply
    assert reading.r == pytest.approx(math.hypot(1.234e-3, 5.6e-4))
    fake.overload = True
    assert drv.read().overload is True


def test_compound_read_of_xy_and_overload():
    drv, fake, transport = make(options={"compound_queries": True})
    reading = drv.read()
    assert transport.sent[-1] == b"SNAP:XY?;STAT:OVLD?\n"
    assert reading.overload is True and reading.x == pytest.approx(1.234e-3)


@pytest.mark.parametrize(
    "garbage",
    [
        b"1.234E-3,-5.6E-4 xyz\n",  # trailing garbage
        b"1.234E-3\n",  # one value where X,Y are two
        b"1.234E-3,-5.6E-4,7\n",  # three
        b"\x811.2,3\n",  # a byte that is not ASCII
        b"1.2,,3\n",
        b"nan-ish,1\n",
    ],
)
@pytest.mark.parametrize("chunk", [0, 1])
def test_garbled_readings_are_reply_errors(garbage, chunk):
    drv, fake, _ = make(chunk)
    fake.xy = garbage
    with pytest.raises(ReplyError):
        drv.read_xy()
    fake.xy = b"2E-3,1E-3\n"  # the next reading is read cleanly
    assert drv.read_xy() == (pytest.approx(2e-3), pytest.approx(1e-3))


def test_the_lockin_is_a_registered_detector_driver():
    info = known_drivers()["lockin"]
    assert info.role == "detector" and info.cls is LockIn
    check_instrument("detector", "lockin", "generic-lockin", {"time_constant": "30 ms"})


def test_profile_and_driver_must_fit_each_other():
    # a digitiser profile for the lock-in driver, and the lock-in's profile for the digitiser
    with pytest.raises(ProfileError, match="commands.read_xy: missing; the 'lockin' driver"):
        check_instrument("detector", "lockin", "generic-digitiser")
    with pytest.raises(ProfileError, match="commands.set_rate: missing; the 'digitiser' driver"):
        check_instrument("detector", "digitiser", "generic-lockin")


def test_a_lockin_profile_is_not_asked_for_a_digitisers_operations():
    text = """
[profile]
name = "minimal-lockin"
role = "detector"
[commands]
identify = { send = "*IDN?", reply = "idn" }
read_xy = { send = "OUTP? XY", reply = "csv_floats", count = 2 }
"""
    prof = parse_profile(text, "minimal.toml", role="detector", driver="lockin")
    assert not prof.has("fetch")
    with pytest.raises(ProfileError, match="commands.read_xy.*'lockin' driver"):
        parse_profile(
            text.replace('read_xy = { send = "OUTP? XY", reply = "csv_floats", count = 2 }', ""),
            "m.toml",
            driver="lockin",
        )
    with pytest.raises(ProfileError, match="commands.read_aux.send"):
        parse_profile(text + 'read_aux = { send = "AUX?", reply = "float" }\n', "m.toml")


def test_bad_options_name_the_option():
    with pytest.raises(DriverConfigError, match="options.time_constant"):
        make(options={"time_constant": "3 V"})
    with pytest.raises(DriverConfigError, match="options.filter_order"):
        make(options={"filter_order": 0})
    with pytest.raises(DriverConfigError, match="options.phase_unit"):
        make(options={"phase_unit": "grad"})
    with pytest.raises(DriverConfigError, match="options.aux_channels"):
        make(options={"aux_channels": {"x": "probe_dc"}})
    with pytest.raises(DriverConfigError, match="unknown option"):
        make(options={"sample_rate": "1 kHz"})
    drv, _, _ = make()
    with pytest.raises(ValueError, match="n: unknown auxiliary input"):
        drv.read_aux("pump_dc")
    with pytest.raises(ValueError, match="seconds"):
        drv.set_time_constant(-1)
