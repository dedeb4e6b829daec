"""The transports' shared framing (`LineBuffer`) on bytes alone: no port, no socket.

References: a reply line ends with the configured terminator, LF (``b"\\n"``) or CR LF
(``b"\\r\\n"``): IEEE Std 488.2-1992 section 8.5 (response message terminator: NL, i.e. LF),
and the CR LF of most RS-232 instrument protocols. The definite-length arbitrary block is
IEEE Std 488.2-1992 section 8.7.9 (``#``, one digit d, d digits of length, then that many
bytes, which may be any byte, LF included); the blocks here are built by pyvisa's encoder
(``pyvisa.util.to_ieee_block``) and their headers read back by pyvisa's parser
(``pyvisa.util.parse_ieee_block_header``), not by this project's code.
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st
from pyvisa.util import parse_ieee_block_header, to_ieee_block

from drivers.errors import ReplyError
from drivers.transports.line_buffer import LineBuffer, LineTooLong


def test_a_line_waits_for_its_terminator_and_comes_without_it():
    buf = LineBuffer(b"\n")
    buf.feed(b"1.25E-3")
    assert buf.next_line() is None
    assert len(buf) == 7  # nothing consumed while incomplete
    buf.feed(b"\nnext")
    assert buf.next_line() == b"1.25E-3"
    assert buf.next_line() is None
    assert buf.pending() == b"next"


def test_a_crlf_terminator_split_across_two_feeds():
    buf = LineBuffer(b"\r\n")
    buf.feed(b"OK\r")
    assert buf.next_line() is None  # CR alone does not end the line
    buf.feed(b"\n")
    assert buf.next_line() == b"OK"
    assert len(buf) == 0


def test_crlf_and_lf_are_different_terminators():
    # With CR LF a bare LF is part of the line; with LF the CR before it stays in the line.
    crlf = LineBuffer(b"\r\n")
    crlf.feed(b"a\nb\r\n")
    assert crlf.next_line() == b"a\nb"
    lf = LineBuffer(b"\n")
    lf.feed(b"a\r\nb\n")
    assert lf.next_line() == b"a\r"
    assert lf.next_line() == b"b"


def test_several_lines_in_one_feed_come_one_at_a_time():
    buf = LineBuffer(b"\n")
    buf.feed(b'0,"No error"\n\n-222,"Data out of range"\n')
    assert buf.next_line() == b'0,"No error"'
    assert buf.next_line() == b""  # an empty line is a line
    assert buf.next_line() == b'-222,"Data out of range"'
    assert buf.next_line() is None


@given(st.lists(st.binary(max_size=20).filter(lambda b: b"\r\n" not in b), max_size=8), st.data())
def test_lines_come_out_the_same_however_the_bytes_are_cut(lines, data):
    stream = b"".join(line + b"\r\n" for line in lines)
    cuts = sorted(data.draw(st.lists(st.integers(0, len(stream)), max_size=10)))
    buf = LineBuffer(b"\r\n")
    got = []
    start = 0
    for end in [*cuts, len(stream)]:
        buf.feed(stream[start:end])
        start = end
        while (line := buf.next_line()) is not None:
            got.append(line)
    # the reference split: bytes.split on the terminator (the last, empty piece is not a line)
    assert got == stream.split(b"\r\n")[:-1] == lines


def test_a_binary_block_holding_the_terminator_is_taken_whole():
    payload = bytes([0x0A, 0x0D, 0x0A, 0x00, 0xFF, 0x0A])  # LF and CR LF inside the data
    buf = LineBuffer(b"\n")
    buf.feed(payload[:4])
    assert buf.take(len(payload)) is None  # incomplete: nothing consumed
    assert len(buf) == 4
    buf.feed(payload[4:] + b"\n")
    assert buf.take(len(payload)) == payload
    assert buf.next_line() == b""  # the message terminator after the block


def test_an_ieee_488_2_definite_length_block_read_with_take():
    values = list(range(123))
    block = to_ieee_block(values, datatype="B")  # b"#3123" + 123 bytes, by pyvisa's encoder
    assert block[:5] == b"#3123"
    header_len, data_len = parse_ieee_block_header(block)  # pyvisa's own reading of the header
    assert (header_len, data_len) == (5, 123)
    buf = LineBuffer(b"\n")
    stream = block + b"\n" + b"+1.0\n"
    for i in range(0, len(stream), 7):  # arrives in pieces of 7 bytes
        buf.feed(stream[i : i + 7])
    assert buf.take(2) == b"#3"
    digits = int(b"#3"[1:])
    length = int(buf.take(digits))
    assert length == data_len
    assert buf.take(length) == bytes(values)  # includes 0x0A (10) and 0x0D (13)
    assert buf.next_line() == b""
    assert buf.next_line() == b"+1.0"


def test_missing_counts_the_bytes_a_take_still_needs():
    buf = LineBuffer(b"\n")
    buf.feed(b"abc")
    assert buf.missing(10) == 7
    assert buf.missing(3) == 0
    assert buf.take(0) == b""
    assert buf.take_all() == b"abc"
    assert len(buf) == 0


def test_an_over_long_line_is_refused_with_a_clear_error():
    buf = LineBuffer(b"\n", max_line=16)
    buf.feed(b"x" * 16)
    assert buf.next_line() is None  # 16 bytes may still become a line
    buf.feed(b"x")
    expected = r"more than 16 bytes arrived without the line terminator b'\\n'"
    with pytest.raises(LineTooLong, match=expected) as err:
        buf.next_line()
    assert isinstance(err.value, ReplyError)  # the session treats it as a bad reply
    buf.clear()
    buf.feed(b"ok\n")
    assert buf.next_line() == b"ok"


def test_a_complete_line_longer_than_allowed_is_refused_too():
    buf = LineBuffer(b"\n", max_line=4)
    buf.feed(b"12345\n")  # arrives in one piece, terminator included
    with pytest.raises(LineTooLong, match="a line of 5 bytes is longer than the 4 allowed"):
        buf.next_line()


def test_a_long_line_fed_byte_by_byte_is_found_once_complete():
    buf = LineBuffer(b"\r\n")
    line = b"1.0," * 2000
    for byte in line + b"\r":
        buf.feed(bytes([byte]))
        assert buf.next_line() is None
    buf.feed(b"\n")
    assert buf.next_line() == line


@pytest.mark.parametrize("terminator", [b"", "\n", None])
def test_the_terminator_must_be_bytes(terminator):
    with pytest.raises(ValueError, match="terminator: expected one or more bytes"):
        LineBuffer(terminator)


@pytest.mark.parametrize("max_line", [0, -1, 1.5, True])
def test_max_line_must_be_a_positive_int(max_line):
    with pytest.raises(ValueError, match="max_line: expected a positive number of bytes"):
        LineBuffer(b"\n", max_line=max_line)


@pytest.mark.parametrize("n", [-1, 1.0, True])
def test_take_needs_a_count(n):
    with pytest.raises(ValueError, match="n: expected a number of bytes >= 0"):
        LineBuffer(b"\n").take(n)
