"""The meter driver (role detector, polled): its profile checks, and its replies parsed on bytes.

The replies are fed to the real session through a scripted transport that hands over the
bytes whole, one byte at a time, or with garbage. Number syntax after IEEE Std 488.2-1992
section 7.7.2 (decimal numeric program data: NR1 ``5``, NR2 ``-0.25``, NR3 ``1.5E-3``);
Python's own ``float()`` of each field is the reference decoder, and the values the test
expects are written out by hand beside the bytes.
"""

from __future__ import annotations

import pytest

from drivers.errors import DriverConfigError, InstrumentTimeout, ProfileError, ReplyError
from drivers.instruments.meter import Meter
from drivers.profile import load_profile, parse_profile
from drivers.registry import check_instrument
from drivers.session import Session
from drivers.transports.line_buffer import LineBuffer

METER_PROFILE = """
[profile]
name = "test-meter"
role = "detector"

[transport]
timeout = "0.2 s"

[commands]
identify = { send = "*IDN?", reply = "idn" }
{extra}
"""

READ_ALL = 'read_all = { send = "READ?", reply = "csv_floats", unit = "V" }'
READ_CHANNEL = 'read_channel = { send = "READ:CHAN? {n}", reply = "float", unit = "mV" }'


class ScriptedTransport:
    """Answers each command line with the scripted reply bytes, handed over in ``chunk``-byte
    pieces (0: whole) through the shared line buffer, as a transport would."""

    resource = "scripted"

    def __init__(self, replies: dict[bytes, bytes], chunk: int = 0):
        self.replies = replies
        self.chunk = chunk
        self.sent: list[bytes] = []
        self._pending = b""
        self._buffer = LineBuffer(b"\n")

    def write(self, data: bytes) -> None:
        self.sent.append(data)
        self._pending += self.replies.get(data.rstrip(b"\n"), b"")

    def read_line(self, deadline) -> bytes:
        while True:
            line = self._buffer.next_line()
            if line is not None:
                return line
            if not self._pending:
                raise InstrumentTimeout("no reply", resource=self.resource)
            n = self.chunk or len(self._pending)
            piece, self._pending = self._pending[:n], self._pending[n:]
            self._buffer.feed(piece)

    def read_exact(self, n, deadline):  # pragma: no cover - no block replies here
        raise AssertionError("no block replies")

    def discard_input(self) -> None:
        self._pending = b""
        self._buffer.clear()

    def reconnect(self) -> None:
        self.discard_input()

    def close(self) -> None:
        pass


def meter(replies: dict[bytes, bytes], *, chunk: int = 0, extra: str = READ_ALL, options=None):
    prof = parse_profile(METER_PROFILE.replace("{extra}", extra), "test-meter.toml", driver="meter")
    transport = ScriptedTransport(replies, chunk)
    session = Session(prof, transport, role="detector", resource="scripted", timeout_s=0.2)
    return Meter(session, options or {}), transport


class Ticks:
    """A clock that advances 1 ms at every look."""

    def __init__(self):
        self.t = 0.0

    def __call__(self) -> float:
        self.t += 1e-3
        return self.t


REPLY = b"8.0265E-01,0.60175,-3.2e-05\n"
EXPECTED = [0.80265, 0.60175, -3.2e-05]  # float() of each field, written out


@pytest.mark.parametrize("chunk", [0, 1, 2, 7], ids=["whole", "bytewise", "pairs", "sevens"])
def test_read_all_parses_the_reply_however_it_arrives(chunk):
    m, _ = meter({b"READ?": REPLY}, chunk=chunk)
    r = m.read(Ticks())
    assert list(r.values) == EXPECTED
    assert r.t_request == pytest.approx(1e-3) and r.t_reply == pytest.approx(2e-3)
    assert r.t == pytest.approx(1.5e-3) and r.spread == pytest.approx(1e-3)
    assert m.channel_names == ("probe", "reference", "pump_monitor")


@pytest.mark.parametrize(
    "reply",
    [
        b"0.8,0.6\n",  # a channel short
        b"0.8,0.6,0.0,0.1\n",  # one too many
        b"0.8,abc,0.0\n",  # garbage in a field
        b"0.8,0.6,0.0garbage\n",  # garbage after the last number
        b"\x00\xff,0.6,0.0\n",  # binary noise
        b"\n",  # an empty line
    ],
)
def test_garbled_read_all_reply_is_a_reply_error(reply):
    m, _ = meter({b"READ?": reply})
    with pytest.raises(ReplyError):
        m.read(Ticks())


def test_the_next_reading_after_garbage_is_clean():
    m, t = meter({b"READ?": b"0.8,xx,0.0\n"})
    with pytest.raises(ReplyError):
        m.read(Ticks())
    t.replies[b"READ?"] = REPLY
    assert list(m.read(Ticks()).values) == EXPECTED


def test_without_read_all_each_channel_is_read_in_turn_and_converted_to_volts():
    replies = {b"READ:CHAN? 1": b"802.65\n", b"READ:CHAN? 2": b"+6.0175E+02\n", b"READ:CHAN? 3": b"-0.032\n"}
    m, t = meter(replies, chunk=1, extra=READ_CHANNEL)
    r = m.read(Ticks())
    # mV -> V: 802.65 mV = 0.80265 V (SI prefix milli, BIPM SI Brochure 9th ed., table 7)
    assert r.values == pytest.approx([0.80265, 0.60175, -3.2e-05], rel=1e-12)
    assert t.sent == [b"READ:CHAN? 1\n", b"READ:CHAN? 2\n", b"READ:CHAN? 3\n"]
    assert r.spread == pytest.approx(1e-3)  # one request stamp before all three, one after


def test_channels_option_selects_and_orders_the_channels():
    replies = {b"READ:CHAN? 3": b"1\n", b"READ:CHAN? 1": b"2\n"}
    m, t = meter(
        replies, extra=READ_CHANNEL, options={"channels": [3, 1], "channel_names": {1: "probe", 3: "x"}}
    )
    assert m.channel_names == ("x", "probe")
    assert list(m.read(Ticks()).values) == pytest.approx([1e-3, 2e-3])


def test_a_reading_that_does_not_come_is_a_timeout_not_a_value():
    m, _ = meter({})
    with pytest.raises(InstrumentTimeout):
        m.read(Ticks())


# -- options -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "options, key",
    [
        ({"poll_rate": "0 Hz"}, "poll_rate"),
        ({"poll_rate": "1 MHz"}, "poll_rate"),
        ({"poll_rate": "20 V"}, "poll_rate"),
        ({"averages": 0}, "averages"),
        ({"averages": 2.5}, "averages"),
        ({"averages": 10}, "averages"),  # the test profile has no set_averages
        ({"range": "2 V"}, "range"),  # ... nor set_range
        ({"channels": []}, "channels"),
        ({"channels": [1, 1]}, "channels"),
        ({"channel_names": "probe"}, "channel_names"),
        ({"sample_rate": "10 kHz"}, "sample_rate"),  # a digitiser's option
    ],
)
def test_bad_option_names_itself(options, key):
    with pytest.raises(DriverConfigError, match=rf"instruments\.detector\.options\.{key}"):
        meter({}, options=options)


def test_poll_rate_with_a_unit():
    m, _ = meter({}, options={"poll_rate": "250 mHz"})
    assert m.poll_rate_hz == pytest.approx(0.25) and m.period_s == pytest.approx(4.0)


# -- which operations each detector driver needs -------------------------------------------


def test_generic_meter_profile_serves_the_meter_driver_not_the_digitiser():
    prof = load_profile("generic-meter", role="detector", driver="meter")
    assert prof.has("read_all") and not prof.has("fetch")
    with pytest.raises(ProfileError, match="'digitiser' driver .* needs set_rate.*fetch"):
        load_profile("generic-meter", role="detector", driver="digitiser")
    load_profile("generic-digitiser", role="detector", driver="digitiser")
    with pytest.raises(ProfileError, match="read_all or read_channel"):
        load_profile("generic-digitiser", role="detector", driver="meter")


def test_a_meter_profile_needs_one_way_of_reading(tmp_path):
    text = METER_PROFILE.replace("{extra}", 'set_range = { send = "RANG {value}" }')
    with pytest.raises(ProfileError, match=r"commands\.read_all: missing; .*read_all or read_channel"):
        parse_profile(text, "m.toml", driver="meter")
    # loaded without a driver, it must serve some detector driver: this one serves none
    with pytest.raises(ProfileError, match="missing"):
        parse_profile(text, "m.toml")
    assert parse_profile(METER_PROFILE.replace("{extra}", READ_ALL), "m.toml").has("read_all")


def test_check_instrument_takes_the_meter_with_the_generic_profile():
    check_instrument("detector", "meter", "generic-meter", {"poll_rate": "50 Hz", "range": "2 V"})
    with pytest.raises(ProfileError):
        check_instrument("detector", "digitiser", "generic-meter", {})
