"""Definite-length blocks of integer codes through the real session, on bytes.

The block framing ``#<d><len><bytes>`` is that of IEEE Std 488.2-1992, section 8.7.9; the
codes are two's complement integers (common practice, no source), worked out by hand below
and checked again with Python's ``int.from_bytes``, which shares no code with the drivers.
"""

from __future__ import annotations

import pytest

from drivers.errors import InstrumentTimeout, ProfileError, ReplyError, TruncatedBlock
from drivers.profile import parse_profile
from drivers.session import Session
from drivers.transports.line_buffer import LineBuffer

PROFILE = """
[profile]
name = "block-test"
role = "detector"
[commands]
identify = { send = "*IDN?", reply = "idn" }
arm = { send = "ARM" }
complete = { send = "DONE?", reply = "bool" }
waveform_scaling = { send = "SCAL? {n}", reply = "csv_floats", count = 4 }
fetch_waveform = { send = "CODES? {n}", reply = "REPLY" }
"""


class BlockTransport:
    """Answers every command with ``reply``, handed over ``chunk`` bytes at a time; once the
    bytes run out a read times out, as the real transports do (a short read is never data)."""

    resource = "bytes://blocks"

    def __init__(self, reply: bytes, chunk: int = 0) -> None:
        self.reply = reply
        self.chunk = chunk
        self.sent: list[bytes] = []
        self.reconnects = 0
        self._pending: list[bytes] = []
        self.buffer = LineBuffer(b"\n")

    def write(self, data: bytes) -> None:
        self.sent.append(data)
        step = self.chunk or len(self.reply) or 1
        self._pending.extend(self.reply[i : i + step] for i in range(0, len(self.reply), step))

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
        self.reconnects += 1
        self.discard_input()

    def close(self) -> None:
        pass


def session_for(reply_format: str, reply: bytes, chunk: int = 0, extra: str = ""):
    text = PROFILE.replace('reply = "REPLY"', f'reply = "{reply_format}"{extra}')
    prof = parse_profile(text, "block-test.toml", driver="scope")
    transport = BlockTransport(reply, chunk)
    return Session(prof, transport, role="detector", resource=transport.resource, timeout_s=1.0), transport


# 0x00 -> 0, 0x01 -> 1, 0x0A -> 10 (a line feed, still data), 0x7F -> 127, 0x80 -> -128,
# 0xFF -> -1: int8 two's complement, worked by hand
INT8_PAYLOAD = b"\x00\x01\x0a\x7f\x80\xff"
INT8_CODES = [0, 1, 10, 127, -128, -1]
# little-endian int16: 34 12 -> 0x1234 = 4660; 0A 00 -> 10; FF 7F -> 32767; 00 80 -> -32768;
# FE FF -> -2 (worked by hand)
INT16LE_PAYLOAD = b"\x34\x12\x0a\x00\xff\x7f\x00\x80\xfe\xff"
INT16_CODES = [4660, 10, 32767, -32768, -2]


def block(payload: bytes) -> bytes:
    length = str(len(payload)).encode()
    return b"#" + str(len(length)).encode() + length + payload + b"\n"


@pytest.mark.parametrize("chunk", [0, 1, 3])
def test_int8_block_whole_and_byte_by_byte(chunk):
    session, _ = session_for("block_i8", block(INT8_PAYLOAD), chunk)
    got = session.query("fetch_waveform", n=1)
    assert got.tolist() == INT8_CODES
    assert got.tolist() == [int.from_bytes(bytes([b]), "little", signed=True) for b in INT8_PAYLOAD]


@pytest.mark.parametrize("chunk", [0, 1, 4])
def test_int16_blocks_of_either_byte_order(chunk):
    session, _ = session_for("block_i16le", block(INT16LE_PAYLOAD), chunk)
    assert session.query("fetch_waveform", n=1).tolist() == INT16_CODES
    swapped = b"".join(INT16LE_PAYLOAD[i : i + 2][::-1] for i in range(0, len(INT16LE_PAYLOAD), 2))
    session, _ = session_for("block_i16be", block(swapped), chunk)
    got = session.query("fetch_waveform", n=1).tolist()
    assert got == INT16_CODES
    assert got == [int.from_bytes(swapped[i : i + 2], "big", signed=True) for i in range(0, len(swapped), 2)]


def test_int8_scale_is_volts_per_code():
    session, _ = session_for("block_i8", block(INT8_PAYLOAD), extra=", scale = 0.5")
    assert session.query("fetch_waveform", n=1).tolist() == [c * 0.5 for c in INT8_CODES]


@pytest.mark.parametrize("chunk", [0, 1])
def test_a_block_cut_short_is_a_reply_error_naming_the_declared_length(chunk):
    # the header declares 6 data bytes; 3 arrive and then nothing
    session, transport = session_for("block_i8", b"#16\x00\x01\x0a", chunk)
    with pytest.raises(TruncatedBlock) as info:
        session.query("fetch_waveform", n=1)
    err = info.value
    assert isinstance(err, ReplyError) and isinstance(err, InstrumentTimeout)
    assert "declares 6 data bytes" in str(err) and "8.7.9" in str(err)
    # treated as a timeout: the session reconnected (and resent the query, safe to repeat)
    assert transport.reconnects == 1 and len(transport.sent) == 2


def test_no_reply_at_all_stays_a_plain_timeout():
    session, _ = session_for("block_i8", b"")
    with pytest.raises(InstrumentTimeout) as info:
        session.query("fetch_waveform", n=1)
    assert not isinstance(info.value, ReplyError)


@pytest.mark.parametrize(
    "reply, match",
    [
        (b"#13\x00\x01\x02\x03\n", "terminator"),  # more data than the header declares
        (b"12,13\n", "expected '#'"),  # ASCII where a block was expected
        (block(b"\x01\x02\x03"), "whole number of 2-byte values"),  # an odd byte count of int16
    ],
)
def test_garbled_blocks_are_reply_errors(reply, match):
    fmt = "block_i16le" if match.startswith("whole") else "block_i8"
    session, _ = session_for(fmt, reply)
    with pytest.raises(ReplyError, match=match):
        session.query("fetch_waveform", n=1)


def test_garbage_after_a_block_is_refused_as_the_next_reply_then_the_input_is_clean():
    session, transport = session_for("block_i8", block(INT8_PAYLOAD) + b"junk\n")
    assert session.query("fetch_waveform", n=1).tolist() == INT8_CODES
    # the block is read by its declared length: "junk" is left over and is what the next
    # query reads first, which is no block
    with pytest.raises(ReplyError, match="expected '#'"):
        session.query("fetch_waveform", n=1)
    transport.reply = block(INT8_PAYLOAD)
    assert session.query("fetch_waveform", n=1).tolist() == INT8_CODES


def test_only_integer_blocks_take_a_scale():
    text = """
[profile]
name = "float-digitiser"
role = "detector"
[commands]
identify = { send = "*IDN?", reply = "idn" }
set_rate = { send = "RATE {value}" }
set_channels = { send = "CHAN {channels}" }
start = { send = "GO" }
stop = { send = "HALT" }
position = { send = "POS?", reply = "int" }
fetch = { send = "DATA? {count}", reply = "block_f32le", scale = 2.0 }
"""
    with pytest.raises(ProfileError, match=r"commands\.fetch\.scale: only integer block replies"):
        parse_profile(text, "scaled.toml", driver="digitiser")
    assert parse_profile(text.replace("block_f32le", "block_i16le"), "ok.toml").command("fetch").scale == 2.0
