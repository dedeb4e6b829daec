"""IEEE 488.2 reply parsing on bytes: blocks, numbers, error-queue replies, identities.

Each parser is fed the same input whole, one byte at a time and with trailing garbage.
Reference formats: IEEE Std 488.2-1992 section 8.7.9 (definite-length arbitrary block:
``#``, one digit d, d digits of length, the bytes), 8.7.10 (indefinite form ``#0``), 10.14
(``*IDN?``: four comma-separated fields, ``0`` when a field is not available); SCPI 1999
volume 2 section 21.8 (``SYST:ERR?`` replies ``<code>,"<text>"``, ``0,"No error"`` when the
queue is empty; ``-113,"Undefined header"`` and ``-222,"Data out of range"`` are standard
codes). Float bytes are built with Python's ``struct`` module as the reference encoder.
"""

from __future__ import annotations

import struct

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from drivers.errors import ReplyError
from drivers.ieee488 import (
    NEED_DATA,
    BlockParser,
    ErrorEntry,
    Identity,
    parse_block,
    parse_bool,
    parse_error_reply,
    parse_float,
    parse_idn,
    parse_int,
    parse_numbers,
)


def block(payload: bytes, terminator: bytes = b"\n") -> bytes:
    """IEEE 488.2 8.7.9 definite-length block, written out independently of the parser."""
    length = str(len(payload)).encode()
    return b"#" + str(len(length)).encode() + length + payload + terminator


def feed_whole(data: bytes, terminator: bytes = b"\n"):
    parser = BlockParser(terminator=terminator)
    parser.feed(data)
    return parser.next()


def feed_bytewise(data: bytes, terminator: bytes = b"\n"):
    parser = BlockParser(terminator=terminator)
    results = []
    for i in range(len(data)):
        parser.feed(data[i : i + 1])
        results.append(parser.next())
    return results


# A float32 whose four bytes are all 0x0A (line feed), and one with a single 0x0A byte.
ALL_LF = struct.unpack("<f", b"\n\n\n\n")[0]
ONE_LF = struct.unpack("<f", b"\x00\n\x80\x3f")[0]


class TestBlockParser:
    def test_whole_block_with_line_feeds_in_payload(self):
        payload = struct.pack("<4f", ALL_LF, 0.5, ONE_LF, -1.25)
        assert payload.count(b"\n") == 5
        assert feed_whole(block(payload)) == payload

    def test_one_byte_at_a_time_completes_only_at_the_end(self):
        payload = struct.pack("<3f", ALL_LF, 1.0, ONE_LF)
        results = feed_bytewise(block(payload))
        # NEED_DATA up to the last byte (the terminator), the payload exactly then
        assert all(r is NEED_DATA for r in results[:-1])
        assert results[-1] == payload

    @given(st.binary(max_size=300), st.lists(st.integers(min_value=1, max_value=40), max_size=30))
    def test_any_split_gives_the_same_payload(self, payload, cuts):
        data = block(payload)
        parser = BlockParser()
        pos, out = 0, NEED_DATA
        for n in cuts + [len(data)]:
            parser.feed(data[pos : pos + n])
            pos += n
            out = parser.next()
            if out is not NEED_DATA:
                break
        if pos < len(data):
            parser.feed(data[pos:])
            out = parser.next()
        assert out == payload

    def test_bytes_needed_reads_exactly_the_block(self):
        payload = bytes(range(256)) * 3
        data = block(payload)
        parser = BlockParser()
        pos = 0
        while (out := parser.next()) is NEED_DATA:
            n = parser.bytes_needed()
            assert n >= 1
            parser.feed(data[pos : pos + n])
            pos += n
        assert out == payload
        assert pos == len(data)  # never asked for a byte beyond the block
        assert parser.declared_length == len(payload)

    def test_empty_block(self):
        # "#10" and the terminator: nothing waiting
        assert feed_whole(b"#10\n") == b""

    def test_crlf_terminator_and_no_terminator(self):
        payload = b"\r\n\r\n"
        assert feed_whole(block(payload, b"\r\n"), terminator=b"\r\n") == payload
        assert feed_whole(block(payload, b""), terminator=b"") == payload

    def test_trailing_garbage_is_an_error(self):
        with pytest.raises(ReplyError, match="unexpected bytes after"):
            feed_whole(block(b"abcd") + b"xyz")

    def test_wrong_terminator_is_an_error(self):
        with pytest.raises(ReplyError, match="terminator"):
            feed_whole(block(b"abcd", b"") + b"X")

    def test_missing_hash(self):
        with pytest.raises(ReplyError, match="expected '#'"):
            feed_whole(b"0.5,0.25\n")

    def test_non_digit_header(self):
        with pytest.raises(ReplyError, match="digit"):
            feed_whole(b"#x12\n")
        with pytest.raises(ReplyError, match="length digits"):
            feed_whole(b"#3a1\n")

    def test_indefinite_form_is_rejected(self):
        with pytest.raises(ReplyError, match="indefinite"):
            feed_whole(b"#0abc\n")

    def test_truncated_header_and_payload_need_data(self):
        assert feed_whole(b"#") is NEED_DATA
        assert feed_whole(b"#2") is NEED_DATA
        assert feed_whole(b"#21") is NEED_DATA
        assert feed_whole(b"#210abc") is NEED_DATA
        with pytest.raises(ReplyError, match="incomplete"):
            parse_block(b"#210abc")

    def test_declared_length_above_limit(self):
        parser = BlockParser(max_payload=100)
        parser.feed(b"#3101")
        with pytest.raises(ReplyError, match="exceeds"):
            parser.next()

    def test_arguments_are_validated(self):
        with pytest.raises(ValueError, match="terminator"):
            BlockParser(terminator="\n")  # type: ignore[arg-type]
        with pytest.raises(ValueError, match="max_payload"):
            BlockParser(max_payload=-1)


class TestNumbers:
    def test_float_forms(self):
        # NR1, NR2, NR3 forms of IEEE 488.2 7.7.2 (decimal numeric program data)
        assert parse_float(b"42") == 42.0
        assert parse_float(b"-0.5") == -0.5
        assert parse_float(b"+2.50E-03") == 2.5e-3
        assert parse_float(" 1e3 ") == 1000.0

    @pytest.mark.parametrize("bad", [b"", b"abc", b"1.2.3", b"nan", b"inf", b"1,2", b"0x10", b"\xff"])
    def test_float_rejects(self, bad):
        with pytest.raises(ReplyError):
            parse_float(bad)

    def test_int(self):
        assert parse_int(b"1234") == 1234
        assert parse_int(b"12.0") == 12
        with pytest.raises(ReplyError, match="integer"):
            parse_int(b"12.5")

    def test_bool(self):
        assert parse_bool(b"1") is True and parse_bool(b"ON") is True and parse_bool(b"on") is True
        assert parse_bool(b"0") is False and parse_bool(b"OFF") is False
        with pytest.raises(ReplyError, match="boolean"):
            parse_bool(b"2")

    def test_list_whole(self):
        values = parse_numbers(b"0.51234,0.49876,0.00012,-1.5E-3")
        np.testing.assert_array_equal(values, [0.51234, 0.49876, 0.00012, -1.5e-3])
        assert values.dtype == np.float64

    def test_empty_reply_is_empty_array(self):
        assert parse_numbers(b"").size == 0
        assert parse_numbers(b"  ").size == 0

    def test_list_wrong_count(self):
        with pytest.raises(ReplyError, match="expected 3 numbers, got 2"):
            parse_numbers(b"1,2", count=3)
        with pytest.raises(ReplyError, match="multiple of 3"):
            parse_numbers(b"1,2,3,4", multiple_of=3)

    @pytest.mark.parametrize("bad, item", [(b"1,2,x", 3), (b"1,,3", 2), (b"1,nan,3", 2), (b"1,2,3,", 4)])
    def test_list_names_the_bad_item(self, bad, item):
        with pytest.raises(ReplyError, match=f"item {item} "):
            parse_numbers(bad)

    def test_long_list_with_garbage_deep_inside(self):
        items = ["0.5"] * 1000
        items[700] = "0.5garbage"
        with pytest.raises(ReplyError, match="item 701 "):
            parse_numbers(",".join(items).encode())

    @given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), max_size=50))
    def test_round_trip_of_repr(self, values):
        text = ",".join(repr(v) for v in values).encode()
        np.testing.assert_array_equal(parse_numbers(text), np.array(values, dtype=np.float64))


class TestErrorReply:
    def test_empty_queue(self):
        assert parse_error_reply(b'0,"No error"') == ErrorEntry(0, "No error")
        assert not parse_error_reply(b'+0,"No error"').is_error

    def test_standard_codes(self):
        assert parse_error_reply(b'-113,"Undefined header"') == ErrorEntry(-113, "Undefined header")
        entry = parse_error_reply(b'-222,"Data out of range;SOUR:CURR 50"')
        assert entry.code == -222 and entry.text == "Data out of range;SOUR:CURR 50" and entry.is_error

    def test_device_code_and_doubled_quote(self):
        # IEEE 488.2 8.7.8: a quote inside string data is doubled
        assert parse_error_reply(b'201,"Interlock ""open"""') == ErrorEntry(201, 'Interlock "open"')

    def test_unquoted_text_is_accepted(self):
        assert parse_error_reply(b"0, No Error") == ErrorEntry(0, "No Error")

    @pytest.mark.parametrize("bad", [b"", b"No error", b'"0","x"', b'-113,"Undefined header', b"abc,1"])
    def test_garbage(self, bad):
        with pytest.raises(ReplyError):
            parse_error_reply(bad)


class TestIdentity:
    def test_four_fields(self):
        ident = parse_idn(b"Quillmoor Instruments,QD-2,QD2-00017,1.4.2")
        assert ident == Identity("Quillmoor Instruments", "QD-2", "QD2-00017", "1.4.2")

    def test_zero_means_not_available(self):
        # IEEE 488.2 10.14.2: a field is ASCII "0" when not reported
        ident = parse_idn(b"Maker,Model,0,0")
        assert ident.serial == "" and ident.firmware == ""

    def test_other_field_order(self):
        ident = parse_idn(
            b"QS-2 shutter controller,Quillmoor Instruments,fw 2.3", ("model", "maker", "firmware")
        )
        assert ident.maker == "Quillmoor Instruments" and ident.model == "QS-2 shutter controller"
        assert ident.firmware == "fw 2.3" and ident.serial == ""

    @pytest.mark.parametrize("bad", [b"", b"just one", b"a,b,c", b"a,b,c,d,e"])
    def test_wrong_field_count(self, bad):
        with pytest.raises(ReplyError, match="4 comma-separated"):
            parse_idn(bad)

    def test_unknown_field_name(self):
        with pytest.raises(ValueError, match="fields"):
            parse_idn(b"a,b", ("maker", "colour"))
