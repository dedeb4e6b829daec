"""The scope driver and the generic-scope profile on bytes, through the real session.

The replies are written out by hand below: definite-length blocks ``#<d><len><bytes>`` after
IEEE Std 488.2-1992, section 8.7.9, holding two's complement codes (common practice, no
source) whose values are worked out by hand beside each payload; decimal numbers after the
same standard's 8.7 response formats. The scaling is the linear one the profile declares,
volts = code * y_scale + y_offset and time = x_origin + k * x_increment (how scopes commonly
describe a record, common practice, no source), with the expected volts and times computed by
hand, not by the code under test. Nothing here is produced by the driver.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np
import pytest

from drivers.errors import (
    DriverConfigError,
    InstrumentTimeout,
    ProfileError,
    ReplyError,
    TruncatedBlock,
)
from drivers.instruments.scope import Acquisition, Scope, parse_scaling
from drivers.profile import BUILTIN_DIR, load_profile, parse_profile
from drivers.registry import check_instrument, known_drivers
from drivers.session import Session
from drivers.transports.line_buffer import LineBuffer

GENERIC = (BUILTIN_DIR / "generic-scope.toml").read_text(encoding="utf-8")


def block(payload: bytes) -> bytes:
    length = str(len(payload)).encode()
    return b"#" + str(len(length)).encode() + length + payload + b"\n"


# channel 1, int16 little-endian: FE FF -> -2, 00 00 -> 0, 0A 00 -> 10 (a line feed byte),
# 64 00 -> 100, FF 7F -> 32767, 00 80 -> -32768
CH1_PAYLOAD = b"\xfe\xff\x00\x00\x0a\x00\x64\x00\xff\x7f\x00\x80"
# 200 ns per sample, record starting 1 us before the trigger, 0.25 mV per code, 0.1 V offset
CH1_SCALING = b"2.0E-07,-1.0E-06,2.5E-04,1.0E-01\n"
# by hand: -2 * 0.25e-3 + 0.1 = 0.0995; 0 -> 0.1; 10 -> 0.1025; 100 -> 0.125;
# 32767 * 0.25e-3 + 0.1 = 8.29175; -32768 * 0.25e-3 + 0.1 = -8.092
CH1_VOLTS = [0.0995, 0.1, 0.1025, 0.125, 8.29175, -8.092]
CH1_TIMES = [-1.0e-6, -0.8e-6, -0.6e-6, -0.4e-6, -0.2e-6, 0.0]
# channel 2: E8 03 -> 1000, 00 00 -> 0, 18 FC -> -1000, 0A 00 -> 10, 0B 00 -> 11, 0C 00 -> 12
CH2_PAYLOAD = b"\xe8\x03\x00\x00\x18\xfc\x0a\x00\x0b\x00\x0c\x00"
# 1 mV per code, -0.5 V offset, the same time base as channel 1
CH2_SCALING = b"+2.0E-07,-1.0E-06,+1.0E-03,-5.0E-01\n"
# by hand: 1000 * 1e-3 - 0.5 = 0.5; 0 -> -0.5; -1000 -> -1.5; 10 -> -0.49; 11 -> -0.489; 12 -> -0.488
CH2_VOLTS = [0.5, -0.5, -1.5, -0.49, -0.489, -0.488]


class ScopeTransport:
    """In-memory transport: each written line is answered by ``respond``; the reply bytes reach
    the line buffer ``chunk`` bytes at a time (0: whole). Once they run out a read times out,
    as the real transports do (a short read is never data)."""

    resource = "bytes://scope"

    def __init__(self, respond: Callable[[str], bytes | None], chunk: int = 0) -> None:
        self.respond = respond
        self.chunk = chunk
        self.sent: list[str] = []
        self._pending: list[bytes] = []
        self.buffer = LineBuffer(b"\n")

    def write(self, data: bytes) -> None:
        text = data.decode("ascii").rstrip("\n")
        self.sent.append(text)
        reply = self.respond(text)
        if reply:
            step = self.chunk or len(reply)
            self._pending.extend(reply[i : i + step] for i in range(0, len(reply), step))

    def _fill(self) -> bool:
        if not self._pending:
            return False
        self.buffer.feed(self._pending.pop(0))
        return True

    def read_line(self, deadline) -> bytes:
        while (line := self.buffer.next_line()) is None:
            if not self._fill():
                raise InstrumentTimeout("no reply", resource=self.resource)
        return line

    def read_exact(self, n: int, deadline) -> bytes:
        while (data := self.buffer.take(n)) is None:
            if not self._fill():
                partial = self.buffer.take_all()
                raise InstrumentTimeout(
                    f"only {len(partial)} of {n} bytes arrived before the timeout", reply=partial
                )
        return data

    def discard_input(self) -> None:
        self._pending.clear()
        self.buffer.clear()

    def reconnect(self) -> None:
        self.discard_input()

    def close(self) -> None:
        pass


class FakeScope:
    """A two-channel scope speaking the generic-scope profile's commands, replies by hand.
    ``busy`` is how many ``CAPT:DONE?`` answer 0 after an arm (-1: never done)."""

    def __init__(self) -> None:
        self.codes = {1: block(CH1_PAYLOAD), 2: block(CH2_PAYLOAD)}
        self.scaling = {1: CH1_SCALING, 2: CH2_SCALING}
        self.length = {1: b"6\n", 2: b"6\n"}
        self.mean = 1
        self.busy = 2
        self._left = 0

    def __call__(self, text: str) -> bytes | None:
        if text == "*IDN?":
            return b"Loopback Devices,SC-2,0042,1.3\n"
        if text == "SYST:ERR?":
            return b'0,"No error"\n'
        if text.startswith("CAPT:MEAN "):
            self.mean = int(text.split()[1])
            return None
        if text == "CAPT:MEAN?":
            return f"{self.mean}\n".encode()
        if text == "CAPT:ARM":
            self._left = self.busy
            return None
        if text == "CAPT:DONE?":
            if self._left == 0:
                return b"1\n"
            self._left -= 1 if self._left > 0 else 0
            return b"0\n"
        head, _, arg = text.partition(" ")
        channel = int(arg) if arg.isdigit() else 0
        if head == "REC:CODE?":
            return self.codes.get(channel)
        if head == "REC:SCAL?":
            return self.scaling.get(channel)
        if head == "REC:LEN?":
            return self.length.get(channel)
        return None


def make(chunk: int = 0, options=None, fake=None, profile=None):
    fake = fake or FakeScope()
    prof = profile or load_profile("generic-scope", role="detector", driver="scope")
    transport = ScopeTransport(fake, chunk)
    session = Session(prof, transport, role="detector", resource=transport.resource, timeout_s=1.0)
    merged = {**prof.options, "channels": [1, 2], **(options or {})}
    return Scope(session, merged), fake, transport


def ticks() -> Callable[[], float]:
    counter = iter(range(100))
    return lambda: float(next(counter))


@pytest.mark.parametrize("chunk", [0, 1, 5])
def test_averaged_acquisition_whole_and_byte_by_byte(chunk):
    scope, fake, transport = make(chunk)
    acq = scope.acquire(averages=16, clock=ticks())
    assert isinstance(acq, Acquisition)
    assert fake.mean == 16 and acq.averages == 16
    # the averaging is set and checked, then the arm, then complete asked until it says 1
    assert transport.sent[:5] == ["CAPT:MEAN 16", "SYST:ERR?", "CAPT:ARM", "SYST:ERR?", "CAPT:DONE?"]
    assert transport.sent.count("CAPT:DONE?") == 3  # busy twice, then done
    assert (acq.t_arm, acq.t_complete) == (0.0, 1.0)
    assert acq.channel_names == ("probe", "reference")
    probe, reference = acq.waveforms
    assert probe.channel == 1 and probe.n == 6
    assert probe.volts.tolist() == pytest.approx(CH1_VOLTS, rel=1e-12)
    assert probe.times.tolist() == pytest.approx(CH1_TIMES, rel=1e-12, abs=1e-21)
    assert (probe.x0, probe.dx) == (pytest.approx(-1e-6), pytest.approx(2e-7))
    assert acq["reference"].volts.tolist() == pytest.approx(CH2_VOLTS, rel=1e-12)
    assert reference.volts.dtype == np.float64
    with pytest.raises(KeyError, match="pump_monitor"):
        acq["pump_monitor"]


def test_identity_and_averages_readback():
    scope, fake, _ = make()
    assert scope.identify().model == "SC-2"
    scope.configure(averages=64)
    assert scope.read_averages() == 64
    scope.configure()  # the option is not given: the instrument's setting stays
    assert fake.mean == 64


def test_single_uses_the_profiles_single_command():
    text = GENERIC.replace('single = { send = "CAPT:MEAN 1" }', 'single = { send = "CAPT:ONCE" }')
    prof = parse_profile(text, "once.toml", driver="scope")
    scope, _, transport = make(profile=prof, options={"averages": 1})
    scope.configure()
    assert transport.sent[-2:] == ["CAPT:ONCE", "SYST:ERR?"]
    assert scope.averages == 1


def test_a_waveform_cut_short_is_a_reply_error_naming_what_was_expected():
    fake = FakeScope()
    fake.codes[1] = b"#212" + CH1_PAYLOAD[:7]  # 7 of the 12 bytes its header declares
    scope, _, _ = make(fake=fake)
    with pytest.raises(TruncatedBlock) as info:
        scope.fetch_waveform(1)
    assert isinstance(info.value, ReplyError)
    assert "declares 12 data bytes" in str(info.value)
    assert "REC:CODE? 1" in str(info.value)


def test_a_shorter_record_than_its_length_says_is_refused():
    fake = FakeScope()
    fake.codes[2] = block(CH2_PAYLOAD[:8])  # a whole block of 4 samples where 6 are said
    scope, _, _ = make(fake=fake)
    with pytest.raises(
        ReplyError, match=r"channel 2 \(reference\): expected 6 samples \(record_length\), got 4"
    ):
        scope.acquire(clock=ticks())


def test_an_empty_record_is_refused():
    fake = FakeScope()
    fake.codes[1] = b"#10\n"
    scope, _, _ = make(fake=fake)
    with pytest.raises(ReplyError, match="no samples"):
        scope.fetch_waveform(1)


@pytest.mark.parametrize(
    "channel, field, reply, match",
    [
        (1, "codes", b"-2,0,10,100,32767,-32768\n", "expected '#'"),  # ASCII where a block is due
        (1, "codes", block(CH1_PAYLOAD[:11]), "whole number of 2-byte values"),
        (1, "scaling", b"2.0E-07,-1.0E-06,2.5E-04\n", "expected 4 numbers"),
        (1, "scaling", b"0,-1.0E-06,2.5E-04,0.1\n", "x_increment"),
        (1, "scaling", b"2.0E-07,-1.0E-06,0,0.1\n", "y_scale"),
        (1, "scaling", b"2.0E-07,-1.0E-06,2.5E-04,0.1 V\n", "not a number"),
        (2, "scaling", b"2.0E-07,-1.0E-06,2.5E-04,1e999\n", "too large|not finite"),
    ],
)
@pytest.mark.parametrize("chunk", [0, 1])
def test_garbled_replies_are_reply_errors_then_the_next_reads_cleanly(channel, field, reply, match, chunk):
    fake = FakeScope()
    good = {"codes": dict(fake.codes), "scaling": dict(fake.scaling)}
    getattr(fake, field)[channel] = reply
    scope, _, _ = make(chunk, fake=fake)
    with pytest.raises(ReplyError, match=match):
        scope.fetch_waveform(channel)
    getattr(fake, field)[channel] = good[field][channel]
    expected = CH1_VOLTS if channel == 1 else CH2_VOLTS
    assert scope.fetch_waveform(channel).volts.tolist() == pytest.approx(expected, rel=1e-12)


def test_an_acquisition_that_never_completes_times_out_naming_the_option():
    fake = FakeScope()
    fake.busy = -1
    scope, _, _ = make(fake=fake, options={"completion_timeout": "50 ms"})
    assert scope.completion_timeout_s == pytest.approx(0.05)
    t0 = time.monotonic()
    with pytest.raises(InstrumentTimeout, match="completion_timeout") as info:
        scope.acquire(clock=ticks())
    assert time.monotonic() - t0 >= 0.05  # it waited the whole timeout, not less
    assert not isinstance(info.value, ReplyError)


def _variant(fetch: str) -> object:
    text = GENERIC.replace(
        'fetch_waveform = { send = "REC:CODE? {n}", reply = "block_i16le" }',
        f'fetch_waveform = {{ send = "REC:CODE? {{n}}", reply = "{fetch}" }}',
    )
    return parse_profile(text, f"{fetch}.toml", driver="scope")


def test_int8_and_big_endian_int16_records():
    fake = FakeScope()
    # int8: 80 -> -128, FF -> -1, 00 -> 0, 01 -> 1, 0A -> 10, 7F -> 127
    fake.codes[1] = block(b"\x80\xff\x00\x01\x0a\x7f")
    scope, _, _ = make(fake=fake, profile=_variant("block_i8"))
    # by hand, 0.25 mV per code and 0.1 V offset: -128 -> 0.068, -1 -> 0.09975, 0 -> 0.1,
    # 1 -> 0.10025, 10 -> 0.1025, 127 -> 0.13175
    assert scope.fetch_waveform(1).volts.tolist() == pytest.approx(
        [0.068, 0.09975, 0.1, 0.10025, 0.1025, 0.13175], rel=1e-12
    )
    fake.codes[1] = block(bytes(b for i in range(0, 12, 2) for b in CH1_PAYLOAD[i : i + 2][::-1]))
    scope, _, _ = make(fake=fake, profile=_variant("block_i16be"))
    assert scope.fetch_waveform(1).volts.tolist() == pytest.approx(CH1_VOLTS, rel=1e-12)


def test_scaling_parser_on_its_own():
    s = parse_scaling([1e-9, -5e-9, 2e-3, -0.25])
    assert (s.x_increment, s.x_origin, s.y_scale, s.y_offset) == (1e-9, -5e-9, 2e-3, -0.25)
    with pytest.raises(ReplyError, match="expected 4 scaling values"):
        parse_scaling([1e-9, 0.0, 2e-3])
    with pytest.raises(ReplyError, match="x_increment"):
        parse_scaling([-1e-9, 0.0, 2e-3, 0.0])


def test_the_scope_is_a_registered_detector_driver():
    info = known_drivers()["scope"]
    assert info.role == "detector" and info.cls is Scope
    check_instrument("detector", "scope", "generic-scope", {"averages": 16, "completion_timeout": "2 s"})


@pytest.mark.parametrize(
    "options, match",
    [
        ({"averages": 0}, "options.averages: 0 is not a whole number"),
        ({"averages": True}, "options.averages"),
        ({"averages": 2.5}, "options.averages"),
        ({"completion_timeout": "3 V"}, "options.completion_timeout"),
        ({"completion_timeout": -1}, "options.completion_timeout"),
        ({"channels": "1,2"}, "options.channels"),
        ({"channels": [0]}, "options.channels: 0 is not a channel number"),
        ({"channels": [1, 1]}, "options.channels.*twice"),
        ({"channel_names": {"x": "probe"}}, "options.channel_names.x"),
        ({"sample_rate": "1 MHz"}, "options.sample_rate: unknown option"),
    ],
)
def test_bad_options_name_the_option(options, match):
    with pytest.raises(DriverConfigError, match=match):
        make(options=options)


def test_averaging_on_a_profile_that_cannot_set_it_is_refused():
    text = GENERIC.replace('set_averages = { send = "CAPT:MEAN {value:.0f}" }\n', "")
    prof = parse_profile(text, "no-mean.toml", driver="scope")
    with pytest.raises(DriverConfigError, match=r"options.averages: .*commands.set_averages"):
        make(profile=prof, options={"averages": 8})
    scope, _, _ = make(profile=prof)
    with pytest.raises(ProfileError, match="commands.set_averages"):
        scope.set_averages(8)
    with pytest.raises(ValueError, match="n: expected a whole number"):
        scope.set_averages(0)


MINIMAL = """
[profile]
name = "minimal-scope"
role = "detector"
[commands]
identify = { send = "*IDN?", reply = "idn" }
arm = { send = "GO" }
complete = { send = "*OPC?", reply = "bool" }
fetch_waveform = { send = "C{n}:RAW?", reply = "block_i8" }
waveform_scaling = { send = "C{n}:SCALE?", reply = "csv_floats", count = 4 }
"""


def test_bad_profiles_name_the_operation():
    prof = parse_profile(MINIMAL, "minimal.toml", driver="scope")
    assert not prof.has("record_length") and not prof.has("fetch")
    with pytest.raises(ProfileError, match=r"commands\.fetch_waveform: missing; the 'scope' driver"):
        parse_profile(
            MINIMAL.replace('fetch_waveform = { send = "C{n}:RAW?", reply = "block_i8" }', ""),
            "m.toml",
            driver="scope",
        )
    with pytest.raises(ProfileError, match=r"commands\.fetch_waveform\.reply: 'block_f32le' does not fit"):
        parse_profile(MINIMAL.replace('"block_i8"', '"block_f32le"'), "m.toml", driver="scope")
    with pytest.raises(
        ProfileError, match=r"commands\.fetch_waveform\.send: .*lacks the placeholder\(s\) \{n\}"
    ):
        parse_profile(MINIMAL.replace("C{n}:RAW?", "RAW?"), "m.toml", driver="scope")
    with pytest.raises(
        ProfileError, match=r"commands\.waveform_scaling\.unit: this operation has no quantity"
    ):
        parse_profile(MINIMAL.replace("count = 4", 'count = 4, unit = "mV"'), "m.toml", driver="scope")
    scaled = parse_profile(
        MINIMAL.replace('"block_i8"', '"block_i8", scale = 0.01'), "scaled.toml", driver="scope"
    )
    with pytest.raises(
        ProfileError, match=r"scaled\.toml: commands\.fetch_waveform\.scale: the scope driver"
    ):
        make(profile=scaled)
    with pytest.raises(ProfileError, match=r"commands\.arm: missing; the 'scope' driver"):
        check_instrument("detector", "scope", "generic-digitiser")
    with pytest.raises(ProfileError, match=r"commands\.read_xy: missing; the 'lockin' driver"):
        check_instrument("detector", "lockin", "generic-scope")
