"""Property-based fuzzing of every parser of outside input: bad input never hurts.

Instrument replies (the IEEE 488.2 block parser, number lists, ``SYST:ERR?``, ``*IDN?``, every
reply format of `drivers.codec.decode_line`, a whole `drivers.session.Session` reading replies
that arrive in pieces), command profiles, bench files, CSV imports and run files whose ``-wal``
file was cut short or damaged. Each input either parses or gives an error of the project's own
types (`bench.errors.GainbenchError` subclasses) whose message names what was read; never
another exception, never a traceback, and a file is never changed by reading it (its bytes
are compared before and after).

Oracles, written here independently of the code under test: the block layout of IEEE Std
488.2-1992 section 8.7.9 (``#``, one digit d of 1-9, d length digits, the bytes); decimal
numerics of section 7.7.2 (NR1/NR2/NR3, checked with Python's own ``float``); the ``SYST:ERR?``
reply ``<code>,"<text>"`` with doubled quotes of SCPI 1999 volume 2 section 21.8 and
IEEE 488.2 section 8.7.8; the ``*IDN?`` fields of IEEE 488.2 section 10.14; SQLite's WAL
guarantee that a commit is whole or absent, and that a damaged or cut-off frame and all later
ones are ignored (https://www.sqlite.org/fileformat.html section 4, "the WAL file format").
That a parser of outside input should fail with a clear error rather than crash is common
practice, no source.

The default suite runs a modest number of examples per property; each property has a
``@pytest.mark.slow`` variant (``..._many``) with many more.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import re
import tempfile
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from bench.config import BenchConfig, builtin_bench_path, load_bench
from bench.errors import ConfigError, RunStoreError
from bench.records import Block, Event
from bench.store import RunReader, RunWriter
from bench.store.csv_import import import_csv
from drivers import codec
from drivers.deadline import Deadline
from drivers.errors import (
    InstrumentError,
    InstrumentReportedError,
    InstrumentTimeout,
    ProfileError,
    ReplyError,
)
from drivers.ieee488 import (
    IDN_FIELDS,
    NEED_DATA,
    BlockParser,
    parse_block,
    parse_bool,
    parse_error_reply,
    parse_float,
    parse_idn,
    parse_int,
    parse_numbers,
)
from drivers.profile import BUILTIN_DIR, Command, ErrorPolicy, builtin_profiles, load_profile
from drivers.roles import PLACEHOLDER_SAMPLES, ROLES
from drivers.session import Session

_HEALTH = [HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much]
FEW = settings(max_examples=100, deadline=None, suppress_health_check=_HEALTH)
MANY = settings(max_examples=2000, deadline=None, suppress_health_check=_HEALTH)


def fuzz(*strategies, examples=(), **kw_strategies):
    """A property as two tests: FEW examples in the default suite, MANY under ``-m slow``.

    ``examples`` are dicts of arguments always tried (hypothesis ``@example``), e.g. the
    inputs that found a bug.
    """

    def make(fn):
        def build(profile):
            test = given(*strategies, **kw_strategies)(fn)
            for ex in examples:
                test = example(**ex)(test)
            return profile(test)

        return build(FEW), pytest.mark.timeout(1800)(pytest.mark.slow(build(MANY)))

    return make


def _digest(path: Path) -> tuple[str, int]:
    data = path.read_bytes()
    return hashlib.sha256(data).hexdigest(), len(data)


# ============================================================================================
# Instrument replies
# ============================================================================================


def _well_formed_block(data: bytes, payload: bytes, terminator: bytes) -> bool:
    """IEEE 488.2 8.7.9, written out here: ``data`` is exactly one block holding ``payload``."""
    if data[:1] != b"#" or not data[1:2].isdigit() or data[1:2] == b"0":
        return False
    d = int(data[1:2])
    digits = data[2 : 2 + d]
    if len(digits) != d or not digits.isdigit():
        return False
    length = int(digits)
    start = 2 + d
    return (
        length == len(payload)
        and data[start : start + length] == payload
        and data[start + length :] == terminator
    )


def _block(payload: bytes, terminator: bytes, pad: int = 0) -> bytes:
    length = str(len(payload)).rjust(len(str(len(payload))) + pad, "0").encode()
    if len(length) > 9:
        length = length[-9:]
    return b"#" + str(len(length)).encode() + length + payload + terminator


def _feed_in_pieces(parser: BlockParser, data: bytes, cuts: list[int]):
    """Feed ``data`` in pieces of the given sizes (then the rest); the payload, NEED_DATA or
    the ReplyError raised, and how many bytes had been fed."""
    pos = 0
    for n in [*cuts, len(data)]:
        if pos >= len(data) and cuts:
            break
        parser.feed(data[pos : pos + n])
        pos = min(len(data), pos + n)
        need = parser.bytes_needed()
        assert isinstance(need, int) and need >= 0
        try:
            out = parser.next()
        except ReplyError as exc:
            assert str(exc).strip()
            return exc, pos
        if out is not NEED_DATA:
            return out, pos
    return NEED_DATA, pos


_TERMINATORS = st.sampled_from([b"\n", b"\r\n", b""])


def _block_parser_on_any_bytes(data, cuts, terminator, max_payload):
    parser = BlockParser(terminator=terminator, max_payload=max_payload)
    out, fed = _feed_in_pieces(parser, data, cuts)
    if isinstance(out, bytes):
        # a payload is returned only for exactly one well-formed block
        assert _well_formed_block(data[:fed], out, terminator), (data[:fed], out)
        assert len(out) <= max_payload


test_block_parser_on_any_bytes, test_block_parser_on_any_bytes_many = fuzz(
    data=st.binary(max_size=300),
    cuts=st.lists(st.integers(1, 40), max_size=12),
    terminator=_TERMINATORS,
    max_payload=st.sampled_from([0, 5, 100, 1 << 20]),
    examples=[{"data": b"#3005abcde\n", "cuts": [1, 1, 1], "terminator": b"\n", "max_payload": 100}],
)(_block_parser_on_any_bytes)


_MUTATIONS = st.lists(
    st.tuples(
        st.sampled_from(["flip", "cut", "insert", "append", "delete"]),
        st.integers(0, 10_000),
        st.binary(min_size=1, max_size=4),
    ),
    max_size=3,
)


def _mutate_bytes(data: bytes, mutations) -> bytes:
    out = bytearray(data)
    for kind, at, junk in mutations:
        i = at % (len(out) + 1)
        if kind == "flip" and out:
            out[i % len(out)] ^= junk[0] or 1
        elif kind == "cut":
            del out[i:]
        elif kind == "insert":
            out[i:i] = junk
        elif kind == "append":
            out += junk
        elif kind == "delete" and out:
            del out[i % len(out)]
    return bytes(out)


def _block_parser_on_near_valid_blocks(payload, pad, terminator, mutations, cuts):
    data = _mutate_bytes(_block(payload, terminator, pad), mutations)
    parser = BlockParser(terminator=terminator)
    out, fed = _feed_in_pieces(parser, data, cuts)
    if isinstance(out, bytes):
        assert _well_formed_block(data[:fed], out, terminator)
    if not mutations:  # an undamaged block, in whatever pieces, gives its payload
        assert out == payload
    try:
        whole = parse_block(data, terminator=terminator)
    except ReplyError as exc:
        assert str(exc).strip()
    else:
        assert _well_formed_block(data, whole, terminator)


test_block_parser_on_near_valid_blocks, test_block_parser_on_near_valid_blocks_many = fuzz(
    payload=st.binary(max_size=200),
    pad=st.integers(0, 3),
    terminator=_TERMINATORS,
    mutations=_MUTATIONS,
    cuts=st.lists(st.integers(1, 30), max_size=10),
)(_block_parser_on_near_valid_blocks)


# -- numbers ---------------------------------------------------------------------------------

#: IEEE 488.2 7.7.2 decimal numeric (NR1, NR2, NR3), written here; white space may surround
#: the exponent's E and the number.
_DECIMAL = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def _as_str(reply) -> str | None:
    if isinstance(reply, bytes):
        try:
            return reply.decode("ascii")
        except UnicodeDecodeError:
            return None
    return reply


def _decimal_value(item: str) -> float | None:
    """The value of one decimal numeric, or None if ``item`` is not one."""
    squeezed = re.sub(r"\s+", "", item)
    inner = item.strip()
    # white space only at the ends, or right before / after the exponent's E or its sign
    if re.search(r"\s", re.sub(r"\s*([eE])\s*([+-]?)\s*", r"\1\2", inner)):
        return None
    if not _DECIMAL.fullmatch(squeezed):
        return None
    return float(squeezed)


_NUMBER_TOKENS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(width=32).map(lambda x: f"{x:.7g}"),
    st.integers(-(10**30), 10**30).map(str),
    st.sampled_from(
        [
            "1e 5",
            " 2.5E-3 ",
            "+.5",
            "-0",
            "1.",
            ".",
            "e5",
            "1e",
            "1_0",
            "nan",
            "inf",
            "0x10",
            "1e999",
            "-1e-999",
            "\t3\t",
            "１",
            "1,",
            "",
            " ",
        ]
    ),
    st.text(max_size=6),
)
_NUMBER_REPLIES = st.one_of(
    st.binary(max_size=120),
    st.text(max_size=120),
    st.lists(_NUMBER_TOKENS, max_size=80).map(",".join),
    st.lists(_NUMBER_TOKENS, max_size=10).map(lambda items: ",".join(items).encode("utf-8")),
)


def _number_lists(reply, count, multiple_of):
    try:
        values = parse_numbers(reply, count=count, multiple_of=multiple_of)
    except ReplyError as exc:
        assert str(exc).startswith("instrument: ")
        return
    text = _as_str(reply)
    assert text is not None, "a reply that is not ASCII was accepted"
    items = [] if not text.strip() else text.split(",")
    assert values.dtype == np.float64 and values.shape == (len(items),)
    assert np.isfinite(values).all()
    if count is not None:
        assert len(items) == count
    if multiple_of:
        assert len(items) % multiple_of == 0
    if len(items) <= 64:  # the documented extent of the item-by-item check
        for item, value in zip(items, values, strict=True):
            assert _decimal_value(item) == value, (item, value)


test_number_lists, test_number_lists_many = fuzz(
    reply=_NUMBER_REPLIES,
    count=st.none() | st.integers(1, 10),
    multiple_of=st.none() | st.integers(0, 4),
    examples=[{"reply": b"1e\t5,2", "count": None, "multiple_of": None}],
)(_number_lists)


def _single_values(reply):
    text = _as_str(reply)
    for parse in (parse_float, parse_int, parse_bool):
        try:
            value = parse(reply)
        except ReplyError as exc:
            assert str(exc).startswith("instrument: ")
            continue
        assert text is not None
        if parse is parse_bool:
            assert isinstance(value, bool) and text.strip().upper() in ("1", "0", "ON", "OFF")
            continue
        expected = _decimal_value(text)
        assert expected is not None and math.isfinite(expected), (text, value)
        assert value == expected
        if parse is parse_int:
            assert isinstance(value, int)


test_single_values, test_single_values_many = fuzz(
    reply=st.one_of(
        st.binary(max_size=30),
        st.text(max_size=30),
        _NUMBER_TOKENS,
        _NUMBER_TOKENS.map(lambda s: s.encode("utf-8")),
    ),
    examples=[{"reply": b"1e\t5"}, {"reply": b"1e999"}, {"reply": "1e\u20035"}],
)(_single_values)


# -- SYST:ERR? and *IDN? ---------------------------------------------------------------------

_ASCII_TEXT = st.text(alphabet=st.characters(min_codepoint=32, max_codepoint=126), max_size=40)


def _error_queue_replies(reply):
    try:
        entry = parse_error_reply(reply)
    except ReplyError as exc:
        assert str(exc).startswith("instrument: ")
        return
    text = _as_str(reply)
    assert text is not None
    head = re.match(r"\s*([+-]?\d+)", text)
    assert head is not None and entry.code == int(head.group(1))
    assert isinstance(entry.text, str)


test_error_queue_replies, test_error_queue_replies_many = fuzz(
    reply=st.one_of(
        st.binary(max_size=60),
        st.text(max_size=60),
        st.builds(
            lambda c, t, q: f"{c},{q}{t}{q}", st.integers(-500, 500), _ASCII_TEXT, st.sampled_from(['"', ""])
        ),
    ),
)(_error_queue_replies)


def _error_queue_round_trip(code, text, spaces):
    # SCPI 21.8 / IEEE 488.2 8.7.8: <code>,"<text>" with each quote in the text doubled
    reply = f'{code}{spaces},{spaces}"{text.replace(chr(34), chr(34) * 2)}"\n'.encode("ascii")
    entry = parse_error_reply(reply)
    assert (entry.code, entry.text) == (code, text)
    assert entry.is_error == (code != 0)


test_error_queue_round_trip, test_error_queue_round_trip_many = fuzz(
    code=st.integers(-(10**6), 10**6),
    text=_ASCII_TEXT,
    spaces=st.sampled_from(["", " ", "  "]),
)(_error_queue_round_trip)


_FIELD_ORDERS = st.permutations(IDN_FIELDS).flatmap(lambda p: st.integers(1, 4).map(lambda k: tuple(p[:k])))


def _identity_replies(reply, fields):
    try:
        identity = parse_idn(reply, fields)
    except ReplyError as exc:
        assert str(exc).startswith("instrument: ")
        return
    text = _as_str(reply).strip()
    parts = [p.strip() for p in text.split(",")]
    assert len(parts) == len(fields)
    for name, part in zip(fields, parts, strict=True):
        assert getattr(identity, name) == ("" if part == "0" else part)


_IDN_FIELD = st.text(
    alphabet=st.characters(min_codepoint=32, max_codepoint=126, blacklist_characters=","), max_size=12
)
test_identity_replies, test_identity_replies_many = fuzz(
    reply=st.one_of(
        st.binary(max_size=60),
        st.text(max_size=60),
        st.lists(_IDN_FIELD, min_size=1, max_size=5).map(",".join),
    ),
    fields=_FIELD_ORDERS,
)(_identity_replies)


# -- every reply format through codec.decode_line ------------------------------------------------


@lru_cache(maxsize=1)
def _line_commands() -> tuple[tuple[Command, ErrorPolicy], ...]:
    """Every one-line reply command of the built-in profiles, with its profile's error policy,
    and one command of each reply format (with units, counts, tokens, fields and enum tables)."""
    found = []
    for name in builtin_profiles():
        p = load_profile(name)
        for command in p.commands.values():
            if command.reply is not None and not command.is_block:
                found.append((command, p.errors))
    prefixed = ErrorPolicy(reply_prefix="ERR")
    extra = [
        Command("f", "F?", "float", si_factor=1e-3, unit="mA"),
        Command("t", "T?", "float", si_offset=273.15, unit="degC"),
        Command("i", "I?", "int"),
        Command("b", "B?", "bool"),
        Command("x", "X?", "text"),
        Command("n", "N?", "idn", fields=("model", "maker")),
        Command("c", "C?", "csv_floats", count=3),
        Command("c", "C?", "csv_floats"),
        Command("k", "K?", "ok", token="DONE"),
        Command("e", "E?", "enum", values={"OPEN": True, "SHUT": False}),
    ]
    found += [(c, ErrorPolicy()) for c in extra] + [(c, prefixed) for c in extra]
    return tuple(found)


def _decode_every_line_format(index, line):
    command, policy = _line_commands()[index % len(_line_commands())]
    try:
        value = codec.decode_line(command, line, policy)
    except InstrumentReportedError as exc:
        assert policy.reply_prefix and line.decode("ascii", "replace").strip().upper().startswith(
            policy.reply_prefix.upper()
        )
        assert str(exc).strip()
        return
    except ReplyError as exc:
        assert str(exc).startswith("instrument: ")
        return
    kinds = {"float": float, "int": int, "bool": bool, "text": str, "enum": bool, "ok": type(None)}
    if command.reply in kinds:
        assert isinstance(value, kinds[command.reply]), (command.reply, value)
    elif command.reply == "csv_floats":
        assert isinstance(value, np.ndarray) and (command.count is None or value.shape == (command.count,))


test_decode_every_line_format, test_decode_every_line_format_many = fuzz(
    index=st.integers(0, 10_000),
    line=st.one_of(
        st.binary(max_size=80),
        _NUMBER_TOKENS.map(lambda s: s.encode("utf-8")),
        st.sampled_from(
            [
                b"ERR 2 bad shutter",
                b"err",
                b"ERR",
                b"ERR x",
                b"OK",
                b"DONE",
                b"open",
                b"ON",
                b"0,0,0",
                b"a,b",
                b"1,2,3",
            ]
        ),
    ),
)(_decode_every_line_format)


def _decode_blocks(fmt, scale, payload):
    command = Command("fetch", "FETC?", fmt, scale=scale)
    size = {"block_f32le": 4, "block_f32be": 4, "block_f64le": 8, "block_i16le": 2, "block_i16be": 2}[fmt]
    try:
        values = codec.decode_block(command, payload)
    except ReplyError as exc:
        assert str(exc).startswith("instrument: ")
        assert len(payload) % size, "a whole number of values was refused"
        return
    assert len(payload) % size == 0 and values.shape == (len(payload) // size,)
    if fmt.startswith("block_i16"):  # whole counts times the scale, always finite
        assert np.isfinite(values).all()


test_decode_blocks, test_decode_blocks_many = fuzz(
    fmt=st.sampled_from(["block_f32le", "block_f32be", "block_f64le", "block_i16le", "block_i16be"]),
    scale=st.sampled_from([1.0, 2.0**-15, 1e-3]),
    payload=st.binary(max_size=64),
)(_decode_blocks)


# -- a whole session reading replies that arrive in pieces --------------------------------------


class _ScriptedTransport:
    """A transport that answers each write with the next scripted reply, in pieces.

    Like a socket or serial port read against a deadline, a read that cannot be satisfied
    from what has arrived raises `InstrumentTimeout` (the transports' contract).
    """

    resource = "scripted"

    def __init__(self, replies: list[bytes], piece: int, read_termination: bytes):
        self.replies = list(replies)
        self.piece = piece
        self.term = read_termination
        self.buffer = b""

    def write(self, data: bytes) -> None:
        assert isinstance(data, bytes) and data
        if self.replies:
            self.buffer += self.replies.pop(0)

    def _take(self, n: int) -> bytes:
        out, self.buffer = self.buffer[:n], self.buffer[n:]
        return out

    def read_line(self, deadline: Deadline) -> bytes:
        got = b""
        while True:
            at = got.find(self.term) if self.term else -1
            if at >= 0:
                self.buffer = got[at + len(self.term) :] + self.buffer
                return got[:at]
            if not self.buffer:
                raise InstrumentTimeout("no complete reply line before the deadline")
            got += self._take(self.piece)

    def read_exact(self, n: int, deadline: Deadline) -> bytes:
        assert n >= 1
        if len(self.buffer) < n:
            raise InstrumentTimeout(f"{len(self.buffer)} of {n} bytes before the deadline")
        return self._take(n)

    def discard_input(self) -> None:
        self.buffer = b""

    def reconnect(self) -> None:
        self.buffer = b""

    def close(self) -> None:
        pass


@lru_cache(maxsize=1)
def _session_queries() -> tuple[tuple[str, str], ...]:
    out = []
    for name in builtin_profiles():
        p = load_profile(name)
        out += [(name, op) for op, c in p.commands.items() if c.reply is not None]
    return tuple(out)


def _session_reads(index, replies, piece):
    name, op = _session_queries()[index % len(_session_queries())]
    profile = load_profile(name)
    transport = _ScriptedTransport(replies, piece, profile.transport.read_termination)
    session = Session(profile, transport, role="fuzzed", resource="scripted", timeout_s=1.0)
    command = profile.command(op)
    params = {p: PLACEHOLDER_SAMPLES[p] for p in command.placeholders}
    try:
        session.query(op, **params)
    except InstrumentError as exc:
        # a bare InstrumentError is what translate_transport_error makes of an exception that
        # is neither an instrument's nor a transport's: a bug in the reply path
        assert type(exc) is not InstrumentError, f"unexpected exception inside the session: {exc}"
        assert str(exc).startswith("fuzzed instrument (scripted): ")


_REPLY_PIECES = st.one_of(
    st.binary(max_size=60),
    st.builds(lambda p, t: _block(p, t), st.binary(max_size=48), st.sampled_from([b"\n", b"\r\n"])),
    st.sampled_from(
        [
            b'0,"No error"\n',
            b'-113,"Undefined header"\n',
            b"1\n",
            b"ON\n",
            b"OK\r\n",
            b"OPEN\r\n",
            b"ERR 2 bad\r\n",
            b"Quillmoor,QP-1,1,2\n",
            b"#0abc\n",
            b"#9999999999\n",
            b"1e\t5\n",
            b"1e999\n",
        ]
    ),
)
test_session_reads, test_session_reads_many = fuzz(
    index=st.integers(0, 10_000),
    replies=st.lists(_REPLY_PIECES, max_size=6),
    piece=st.integers(1, 64),
)(_session_reads)


# ============================================================================================
# Command profiles
# ============================================================================================

_UNITS = [
    "A",
    "mA",
    "V",
    "mV",
    "degC",
    "K",
    "Hz",
    "kHz",
    "nm",
    "m",
    "s",
    "ms",
    "W",
    "kg",
    "furlong",
    "",
    "m**99",
    "9**9**9",
    "1/0",
]
_COMMAND_KEYS = [
    "send",
    "reply",
    "unit",
    "scale",
    "token",
    "count",
    "fields",
    "values",
    "idempotent",
    "check_errors",
]
_REPLY_WORDS = [
    "float",
    "int",
    "bool",
    "text",
    "idn",
    "csv_floats",
    "ok",
    "enum",
    "block_f32le",
    "block_i16be",
    "block_f64le",
    "nope",
]
_SEND_PARTS = st.sampled_from(
    [
        "SOUR:CURR ",
        "{value:.6g}",
        "{value}",
        "{n}",
        "{hz:.3f}",
        "{count}",
        "{channels}",
        "{spec}",
        "{value:9999999999}",
        "{value:{n}}",
        "{value!r}",
        "{",
        "}",
        "{{",
        "?",
        "é",
        "ü",
        "OUTP",
        " ",
        ";",
        "{nope}",
        "{0}",
        "{value[0]}",
    ]
)


def _toml_string(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _toml_key(key: str) -> str:
    return key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else _toml_string(key)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return (
            repr(value)
            if not isinstance(value, float) or math.isfinite(value)
            else {"nan": "nan", "inf": "inf", "-inf": "-inf"}[repr(value)]
        )
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items()) + " }"
    raise AssertionError(value)


_KEYS = st.one_of(
    st.sampled_from(["name", "role", "description", "timeout", "query", "OPEN", "SHUT", "x"]),
    st.text(min_size=1, max_size=8),
)
_SCALARS = st.one_of(
    st.booleans(),
    st.integers(-(10**20), 10**20),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=20),
    st.sampled_from(_UNITS + _REPLY_WORDS + ["\\n", "\\r\\n", "\\x0", "\\q", "2 s", "-1 s"]),
)
_TOML_VALUES = st.recursive(
    _SCALARS,
    lambda inner: st.one_of(st.lists(inner, max_size=3), st.dictionaries(_KEYS, inner, max_size=3)),
    max_leaves=6,
)

_COMMAND_ENTRIES = st.one_of(
    st.lists(_SEND_PARTS, max_size=4).map("".join),
    st.fixed_dictionaries(
        {"send": st.lists(_SEND_PARTS, min_size=1, max_size=4).map("".join)},
        optional={
            "reply": st.one_of(
                st.sampled_from(_REPLY_WORDS), st.dictionaries(_KEYS, st.booleans(), max_size=2), _SCALARS
            ),
            "unit": st.one_of(st.sampled_from(_UNITS), _SCALARS),
            "scale": _SCALARS,
            "token": _SCALARS,
            "count": _SCALARS,
            "values": _TOML_VALUES,
            "fields": st.one_of(st.lists(st.sampled_from([*IDN_FIELDS, "colour"]), max_size=5), _SCALARS),
            "idempotent": _SCALARS,
            "check_errors": _SCALARS,
        },
    ),
    _TOML_VALUES,
)
_ALL_OPS = sorted({op for ops in ROLES.values() for op in ops})


@st.composite
def _profile_documents(draw) -> str:
    role = draw(st.one_of(st.sampled_from(sorted(ROLES)), st.text(max_size=8)))
    ops = sorted(ROLES.get(role, ROLES["pump"]))
    doc: dict[str, dict] = {}
    if draw(st.integers(0, 9)):
        doc["profile"] = draw(
            st.fixed_dictionaries(
                {},
                optional={
                    "name": st.one_of(st.just("fuzz"), _SCALARS),
                    "role": st.just(role),
                    "description": _SCALARS,
                    "colour": _SCALARS,
                },
            )
        )
    if draw(st.booleans()):
        doc["transport"] = draw(
            st.fixed_dictionaries(
                {},
                optional={
                    "read_termination": _SCALARS,
                    "write_termination": _SCALARS,
                    "timeout": _SCALARS,
                    "baudrate": _SCALARS,
                    "chunk_size": _SCALARS,
                },
            )
        )
    if draw(st.booleans()):
        doc["errors"] = draw(
            st.fixed_dictionaries(
                {},
                optional={
                    "query": st.one_of(st.just("SYST:ERR?"), _SCALARS),
                    "drain_after_set": _SCALARS,
                    "max_entries": _SCALARS,
                    "reply_prefix": _SCALARS,
                },
            )
        )
    if draw(st.integers(0, 9)):
        names = draw(
            st.lists(
                st.one_of(st.sampled_from(ops), st.sampled_from(_ALL_OPS), st.text(max_size=6)),
                max_size=8,
                unique=True,
            )
        )
        required = [op for op, spec in ROLES.get(role, {}).items() if spec.required]
        if draw(st.booleans()):
            names = list(dict.fromkeys(required + names))
        doc["commands"] = {n: draw(_COMMAND_ENTRIES) for n in names}
    if draw(st.booleans()):
        doc["options"] = draw(st.dictionaries(_KEYS, _TOML_VALUES, max_size=3))
    if draw(st.booleans()):
        doc[draw(st.text(min_size=1, max_size=6))] = {}
    lines = []
    for section, table in doc.items():
        lines.append(f"[{_toml_key(section)}]")
        lines += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in table.items()]
    text = "\n".join(lines) + "\n"
    if draw(st.integers(0, 9)) == 0:  # now and then, text that is not quite TOML
        at = draw(st.integers(0, len(text)))
        text = text[:at] + draw(st.text(max_size=5)) + text[at:]
    return text


def _check_profile_text(text: str, encoding_errors: bool = False) -> None:
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "fuzz-profile.toml"
        path.write_bytes(
            text.encode("utf-8", "surrogatepass") if not encoding_errors else text.encode("latin-1")
        )
        before = _digest(path)
        try:
            profile = load_profile(path)
        except ProfileError as exc:
            assert str(exc).startswith(f"command profile {path}"), str(exc)
        else:
            # a profile that loads can build every one of its commands
            for command in profile.commands.values():
                params = {p: PLACEHOLDER_SAMPLES[p] for p in command.placeholders}
                data = codec.encode(command, params, profile.transport.write_termination)
                assert data.endswith(profile.transport.write_termination) and data.isascii()
            if profile.errors.query is not None:
                assert profile.errors.query.isascii()
        assert _digest(path) == before


def _random_profiles(text):
    _check_profile_text(text)


test_random_profiles, test_random_profiles_many = fuzz(
    text=_profile_documents(),
    examples=[
        {
            "text": '[profile]\nname = "x"\nrole = "shutter"\n[commands]\nidentify = { send = "ID", reply = "text" }\nopen = "OPEN {n:9999999999}"\n'
            'close = "SHUT {n}"\nstate = { send = "ST {n}", reply = "bool" }\n'
        },
        {
            "text": '[profile]\nname = "x"\nrole = "shutter"\n[commands]\nidentify = { send = "ID é", reply = "text" }\nopen = "OPEN {n}"\n'
            'close = "SHUT {n}"\nstate = { send = "ST {n}", reply = "bool" }\n'
        },
        {
            "text": '[profile]\nname = "x"\nrole = "shutter"\n[errors]\nquery = "ERR?ü"\n[commands]\nidentify = { send = "ID", reply = "text" }\n'
            'open = "OPEN {n}"\nclose = "SHUT {n}"\nstate = { send = "ST {n}", reply = "bool" }\n'
        },
    ],
)(_random_profiles)


_KEY_LINE = re.compile(r"^(\s*)([A-Za-z0-9_]+)(\s*=\s*)(.*)$")
_LINE_MUTATIONS = st.lists(
    st.tuples(
        st.sampled_from(
            ["value", "value", "splice", "splice", "delete", "rename", "drop", "duplicate", "swap", "junk"]
        ),
        st.integers(0, 10_000),
        st.integers(0, 10_000),
        st.one_of(
            _SCALARS.map(_toml_value),
            _TOML_VALUES.map(_toml_value),
            st.builds(
                lambda x, u: _toml_string(f"{x:g} {u}".strip()),
                st.floats(allow_nan=True, allow_infinity=True),
                st.sampled_from(_UNITS + ["cm^-3", "cm^2", "W/A", "V/W", "%"]),
            ),
            st.text(max_size=12),
        ),
        st.one_of(
            st.text(min_size=1, max_size=10),
            st.sampled_from(
                [
                    "spectrum",
                    "zero_line",
                    "pulse_energy",
                    "kind",
                    "length",
                    "options",
                    "driver",
                    "resource",
                    "profile",
                    "transmission_jump",
                    "seed",
                    "simulated",
                    "send",
                ]
            ),
        ),
    ),
    min_size=1,
    max_size=4,
)


def _mutate_lines(text: str, mutations) -> str:
    """Values replaced by random text or numbers, keys deleted or renamed, lines dropped,
    duplicated or swapped, junk inserted."""
    lines = text.splitlines()
    for kind, i, j, value, name in mutations:
        keyed = [k for k, line in enumerate(lines) if _KEY_LINE.match(line)]
        if not lines:
            break
        at = i % len(lines)
        if kind in ("value", "delete", "rename") and keyed:
            k = keyed[i % len(keyed)]
            indent, key, eq, _old = _KEY_LINE.match(lines[k]).groups()
            if kind == "value":
                lines[k] = f"{indent}{key}{eq}{value}"
            elif kind == "delete":
                del lines[k]
            else:
                lines[k] = f"{indent}{_toml_key(name)}{eq}{_old}"
        elif kind == "splice":  # text inserted inside a line (into a string, a unit, a template)
            where = j % (len(lines[at]) + 1)
            lines[at] = lines[at][:where] + str(name) + lines[at][where:]
        elif kind == "drop":
            del lines[at]
        elif kind == "duplicate":
            lines.insert(at, lines[at])
        elif kind == "swap":
            b = j % len(lines)
            lines[at], lines[b] = lines[b], lines[at]
        elif kind == "junk":
            lines.insert(at, value)
    return "\n".join(lines) + "\n"


def _mutated_builtin_profiles(index, mutations):
    names = builtin_profiles()
    text = (BUILTIN_DIR / f"{names[index % len(names)]}.toml").read_text(encoding="utf-8")
    _check_profile_text(_mutate_lines(text, mutations))


test_mutated_builtin_profiles, test_mutated_builtin_profiles_many = fuzz(
    index=st.integers(0, 100),
    mutations=_LINE_MUTATIONS,
)(_mutated_builtin_profiles)


def _profile_bytes(data):
    # bytes that may not be UTF-8 at all
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bytes.toml"
        path.write_bytes(data)
        try:
            load_profile(path)
        except ProfileError as exc:
            assert str(exc).startswith(f"command profile {path}")
        assert path.read_bytes() == data


test_profile_bytes, test_profile_bytes_many = fuzz(
    data=st.one_of(
        st.binary(max_size=200),
        st.builds(
            lambda t, m: _mutate_bytes(t, m),
            st.sampled_from([p.read_bytes() for p in sorted(BUILTIN_DIR.glob("*.toml"))]),
            _MUTATIONS,
        ),
    ),
)(_profile_bytes)


# ============================================================================================
# Bench files
# ============================================================================================


@lru_cache(maxsize=1)
def _demo_text() -> str:
    return builtin_bench_path().read_text(encoding="utf-8")


def _check_finite(cfg: BenchConfig) -> None:
    """Every number of a bench that loaded is a finite SI float (instrument options aside)."""

    def walk(obj, where):
        if dataclasses.is_dataclass(obj):
            for f in dataclasses.fields(obj):
                if f.name not in ("options", "overrides"):
                    walk(getattr(obj, f.name), f"{where}.{f.name}")
        elif isinstance(obj, dict) or hasattr(obj, "items") and not isinstance(obj, str):
            for k, v in obj.items():
                walk(v, f"{where}.{k}")
        elif isinstance(obj, float):
            assert math.isfinite(obj), where

    walk(cfg, "cfg")


def _check_bench_text(text: str, overrides=None) -> None:
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "fuzz-bench.toml"
        path.write_text(text, encoding="utf-8")
        before = _digest(path)
        try:
            cfg = load_bench(path, overrides=overrides)
        except ConfigError as exc:
            message = str(exc)
            # every error names the bench file (or the --set key, or the spectrum file it names)
            assert (
                message.startswith(str(path))
                or message.startswith("--set ")
                or message.startswith(str(Path(d)))
            ), message
        else:
            _check_finite(cfg)
        assert _digest(path) == before


def _mutated_bench_files(mutations):
    _check_bench_text(_mutate_lines(_demo_text(), mutations))


test_mutated_bench_files, test_mutated_bench_files_many = fuzz(mutations=_LINE_MUTATIONS)(
    _mutated_bench_files
)


@lru_cache(maxsize=1)
def _demo_keys() -> tuple[str, ...]:
    keys, table = [], ""
    for line in _demo_text().splitlines():
        if m := re.match(r"^\[([^\]]+)\]", line):
            table = m.group(1)
        elif m := _KEY_LINE.match(line):
            keys.append(f"{table}.{m.group(2)}")
    keys += ["instruments.detector.options.sample_rate", "instruments.detector.options.range"]
    return tuple(keys)


def _bench_overrides(items):
    overrides = {}
    for key, value in items:
        overrides[key if isinstance(key, str) else _demo_keys()[key % len(_demo_keys())]] = value
    _check_bench_text(_demo_text(), overrides=overrides)


test_bench_overrides, test_bench_overrides_many = fuzz(
    items=st.lists(
        st.tuples(
            st.one_of(st.integers(0, 1000), st.text(max_size=12)),
            st.one_of(
                st.text(max_size=15),
                st.sampled_from(["true", "1e400", "9" * 5000, "5 kg", "-3 mm", "nan K", "2 kHz"]),
            ),
        ),
        min_size=1,
        max_size=3,
    ),
)(_bench_overrides)


# ============================================================================================
# CSV import
# ============================================================================================

_CSV_COLUMNS = {"time": "time", "probe": "ch1", "reference": "ch2", "pump_on": "trig"}
_CSV_DT = 1e-3


@lru_cache(maxsize=1)
def _csv_cfg() -> BenchConfig:
    return load_bench()


_CELLS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.text(max_size=5),
    st.sampled_from(["", "on", "OFF", "yes", "1e999", " 1.5 ", '"2.5"', "#", "1_0"]),
)


@st.composite
def _csv_files(draw):
    """A CSV file (text) and, for each row written, what the import must store if it succeeds."""
    delimiter = draw(st.sampled_from([",", ";", "\t"]))
    header = ["time", "ch1", "ch2"] + (["trig"] if draw(st.booleans()) else [])
    header += draw(st.lists(st.sampled_from(["ch3", "note", "x"]), max_size=2))
    order = draw(st.permutations(header))
    lines = [
        draw(st.text(alphabet="0123456789 .,;:-+=/", max_size=20)) for _ in range(draw(st.integers(0, 3)))
    ]
    lines.append(delimiter.join(order))
    t = draw(st.floats(-1.0, 1.0))
    expected = []  # (time, probe, reference, pump) of every data row, or None for a bad row
    for _ in range(draw(st.integers(0, 40))):
        kind = draw(
            st.sampled_from(
                ["good"] * 8 + ["gap", "jitter", "irregular", "back", "bad", "short", "blank", "comment"]
            )
        )
        if kind == "blank":
            lines.append(draw(st.sampled_from(["", " ", delimiter * 2])))
            continue
        if kind == "comment":
            lines.append("# " + draw(st.text(max_size=10)).replace("\n", " ").replace("\r", " "))
            continue
        step = {
            "gap": draw(st.integers(2, 4)),
            "jitter": 1 + draw(st.floats(-0.2, 0.2)),
            "irregular": 1.5,
            "back": -1,
        }.get(kind, 1)
        t = t + step * _CSV_DT
        values = {
            "time": repr(t),
            "ch1": repr(draw(st.floats(-5, 5))),
            "ch2": repr(draw(st.floats(-5, 5))),
            "trig": draw(st.sampled_from(["0", "4.9", "on", "off", "0.5", "0.51"])),
            "ch3": "1",
            "note": "n",
            "x": "",
        }
        cells = [values[c] for c in order]
        used = [order.index(c) for c in ("time", "ch1", "ch2", "trig") if c in order]
        if kind == "bad":  # a cell of a column the import reads that is not a finite number
            cells[draw(st.sampled_from(used))] = draw(
                st.sampled_from(["x", "", "1e999", "nan", "-inf", "--", "1.2.3", "0x1", "ja"])
            )
        if kind == "short":
            cells = cells[: draw(st.integers(1, max(used)))]
        line = delimiter.join(cells)
        lines.append(line)
        if kind == "short" and not line.replace(delimiter, "").strip():
            continue  # cut down to empty cells only: a blank line, which a CSV reader skips
        if kind in ("bad", "short"):
            expected.append(None)
        else:
            trig = values["trig"]
            pump = {"on": 1.0, "off": 0.0}.get(
                trig, 1.0 if trig not in ("on", "off") and float(trig) > 0.5 else 0.0
            )
            expected.append(
                (t, float(values["ch1"]), float(values["ch2"]), pump if "trig" in header else None)
            )
    newline = draw(st.sampled_from(["\n", "\r\n"]))
    bom = "\ufeff" if draw(st.booleans()) else ""
    return bom + newline.join(lines) + newline, expected


def _check_csv(text: str, expected, block_size: int) -> None:
    cfg = _csv_cfg()
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "scope.csv"
        path.write_bytes(text.encode("utf-8"))
        before = _digest(path)
        logs = Path(d) / "logs"
        header = next((ln for ln in text.lstrip("\ufeff").splitlines() if "time" in ln), "")
        columns = {k: v for k, v in _CSV_COLUMNS.items() if k != "pump_on" or "trig" in header}
        try:
            run = import_csv(path, columns, cfg, logs, block_size=block_size)
        except ConfigError as exc:
            assert str(exc).startswith(f"{path}: "), str(exc)
            assert not logs.exists() or not any(logs.iterdir()), "a failed import left files behind"
        else:
            if expected is not None:
                assert None not in expected, "a bad row was imported"
            _check_imported(run, expected, "pump_on" in columns)
        assert _digest(path) == before


def _check_imported(run: Path, expected, with_pump: bool) -> None:
    with RunReader(run) as r:
        r.integrity_check()
        blocks = list(r.iter_blocks(source="detector"))
        gaps = [e for e in r.events() if e.kind == "gap"]
    data = np.concatenate([b.data for b in blocks]) if blocks else np.empty((0, 3 if with_pump else 2))
    ends = [b.first_index + b.n for b in blocks]
    # the sample indices run on without overlap, and every jump is a logged gap
    jumps = sum(b.first_index - end for b, end in zip(blocks[1:], ends[:-1], strict=True))
    assert all(b.first_index >= end for b, end in zip(blocks[1:], ends[:-1], strict=True))
    assert jumps == sum(e.data["missing"] for e in gaps)
    if expected is None:
        return
    assert data.shape[0] == len(expected)
    want = np.array([row[1:3] + ((row[3],) if with_pump else ()) for row in expected], dtype=np.float64)
    np.testing.assert_array_equal(data, want.reshape(data.shape))
    t0 = expected[0][0]
    times = np.concatenate([b.times() for b in blocks])
    dt = blocks[0].dt
    # every sample sits within a quarter interval of its file time (the import's documented rule)
    assert np.all(
        np.abs(times - (np.array([row[0] for row in expected]) - t0)) <= 0.25 * dt * (1 + 1e-9) + 1e-12
    )


def _csv_import_of_generated_files(file, block_size):
    text, expected = file
    _check_csv(text, expected, block_size)


test_csv_import_of_generated_files, test_csv_import_of_generated_files_many = fuzz(
    file=_csv_files(),
    block_size=st.integers(1, 16),
)(_csv_import_of_generated_files)


def _csv_import_of_any_text(text):
    _check_csv(text, None, 7)


test_csv_import_of_any_text, test_csv_import_of_any_text_many = fuzz(
    text=st.one_of(
        st.text(max_size=300),
        st.lists(st.lists(_CELLS, max_size=5).map(",".join), max_size=12).map(
            lambda rows: "time,ch1,ch2,trig\n" + "\n".join(rows)
        ),
    ),
)(_csv_import_of_any_text)


# ============================================================================================
# Run files cut off while recording: the -wal file truncated or damaged
# ============================================================================================

_WAL_BLOCKS = 12


def _wal_block(seq: int) -> Block:
    rng = np.random.default_rng(seq)
    return Block(
        "detector", seq, seq * 0.064, 1e-3, seq * 64, ("probe", "reference"), rng.normal(size=(64, 2))
    )


@lru_cache(maxsize=1)
def _wal_run() -> tuple[bytes, bytes]:
    """The main file and -wal file of a run being recorded: one commit per block."""
    with tempfile.TemporaryDirectory() as d:
        w = RunWriter.create(d, bench_text="[bench]\nname = 'wal'\n", sample_id="W", flush_interval=1.0)
        try:
            for seq in range(_WAL_BLOCKS):
                w.append_block(_wal_block(seq))
                w.append_event(Event(seq * 0.064, "note", f"block {seq}"))
                w.flush()
            main, wal = w.path.read_bytes(), Path(f"{w.path}-wal").read_bytes()
        finally:
            w.close()
    assert len(wal) > 32  # the WAL header and frames: nothing was merged yet
    return main, wal


def _check_wal_run(wal: bytes) -> None:
    main, _ = _wal_run()
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "cut.gbrun"
        path.write_bytes(main)
        Path(f"{path}-wal").write_bytes(wal)
        before = (_digest(path), _digest(Path(f"{path}-wal")))
        try:
            with RunReader(path) as r:
                blocks = list(r.iter_blocks())
                events = r.events()
                r.summary()
                r.integrity_check()
        except RunStoreError as exc:
            assert str(exc).startswith(f"{path}: ")
        else:
            # whole commits or none: what is there is the first k blocks, bit for bit
            assert [b.seq for b in blocks] == list(range(len(blocks)))
            for b in blocks:
                assert np.array_equal(b.data, _wal_block(b.seq).data)
            notes = [e.text for e in events if e.kind == "note"]
            assert notes == [f"block {k}" for k in range(len(blocks))]
        assert (_digest(path), _digest(Path(f"{path}-wal"))) == before


def _truncated_wal(cut):
    _check_wal_run(_wal_run()[1][:cut])


test_truncated_wal, test_truncated_wal_many = fuzz(
    cut=st.integers(0, 1 << 30).map(lambda c: c % (len(_wal_run()[1]) + 1)),
    examples=[{"cut": 0}, {"cut": 31}, {"cut": 32}],
)(_truncated_wal)


def _damaged_wal(flips):
    wal = bytearray(_wal_run()[1])
    for position, bit in flips:
        wal[position % len(wal)] ^= 1 << bit
    _check_wal_run(bytes(wal))


test_damaged_wal, test_damaged_wal_many = fuzz(
    flips=st.lists(
        st.tuples(st.one_of(st.integers(0, 64), st.integers(0, 1 << 30)), st.integers(0, 7)),
        min_size=1,
        max_size=6,
    ),
)(_damaged_wal)


def test_the_wal_template_is_a_real_cut_off_run():
    """The template the WAL fuzz starts from: the main file alone holds no block, main and
    -wal together hold every block (so a cut -wal really loses data)."""
    main, wal = _wal_run()
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "whole.gbrun"
        path.write_bytes(main)
        Path(f"{path}-wal").write_bytes(wal)
        with RunReader(path) as r:
            assert r.block_count() == _WAL_BLOCKS and r.status == "incomplete"
        Path(f"{path}-wal").unlink()
        Path(f"{path}-shm").unlink(missing_ok=True)
        with RunReader(path) as r:
            assert r.block_count() == 0
    assert int.from_bytes(wal[:4], "big") in (0x377F0682, 0x377F0683)  # SQLite file format 4.1: WAL magic
