"""IEEE 488.2 reply syntax, parsed without any I/O.

Everything here works on bytes or text that have already arrived: the definite-length
arbitrary block (an incremental parser in the manner of a sans-I/O protocol object), lists of
decimal numbers, the ``SYST:ERR?`` reply and the ``*IDN?`` reply. Errors are `ReplyError`
without instrument context; the session adds it.

References
----------
.. [1] IEEE Std 488.2-1992, "IEEE Standard Codes, Formats, Protocols, and Common Commands",
   section 8.7.9 (definite length arbitrary block response data), 8.7.10 (indefinite length),
   8.7.8 (string response data), 10.14 (``*IDN?``).
.. [2] SCPI Consortium, "Standard Commands for Programmable Instruments", 1999, volume 2,
   section 21.8 (``SYSTem:ERRor``): replies ``<code>,"<text>"``, ``0,"No error"`` when empty.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from drivers.errors import ReplyError, shorten


class _NeedData:
    """The sentinel `BlockParser.next` returns while a block is incomplete."""

    _instance: _NeedData | None = None

    def __new__(cls) -> _NeedData:
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return "NEED_DATA"

    def __bool__(self) -> bool:
        return False


#: Returned by `BlockParser.next` while more bytes are needed.
NEED_DATA = _NeedData()

#: Largest payload accepted by default (a guard against a garbled header such as ``#9999999999``).
DEFAULT_MAX_PAYLOAD = 256 * 1024 * 1024


class BlockParser:
    """Incremental parser of one IEEE 488.2 definite-length arbitrary block ``#<d><len><bytes>``.

    Feed bytes as they arrive with `feed`; `next` returns the payload once the header, exactly
    ``len`` payload bytes and the terminator have arrived, or `NEED_DATA` until then. A byte
    0x0A inside the payload is data, never the end of the block: only the declared length
    counts. `bytes_needed` says how many more bytes are certainly needed, so a transport can
    read exactly that many and never block waiting for bytes that will not come.

    The indefinite form ``#0<bytes><NL^END>`` is **rejected**: over a byte stream (TCP socket,
    serial line) there is no END signal, so a 0x0A in the data could not be told from the
    terminator.

    Parameters
    ----------
    terminator : bytes
        What follows the payload (``b"\\n"``; ``b""`` if nothing does).
    max_payload : int
        Largest declared length accepted.

    Raises
    ------
    ReplyError
        From `next`: no ``#`` at the start, a non-digit in the header, the ``#0`` form, a length
        above ``max_payload``, a wrong terminator, or bytes after the terminator.
    """

    # States, and which method handles each one (the table is the whole state machine).
    _HASH, _DIGITS, _LENGTH, _PAYLOAD, _TERMINATOR, _DONE = range(6)

    def __init__(self, *, terminator: bytes = b"\n", max_payload: int = DEFAULT_MAX_PAYLOAD) -> None:
        if not isinstance(terminator, (bytes, bytearray)):
            raise ValueError(f"terminator: expected bytes, got {terminator!r}")
        if not isinstance(max_payload, int) or max_payload < 0:
            raise ValueError(f"max_payload: expected an int >= 0, got {max_payload!r}")
        self.terminator = bytes(terminator)
        self.max_payload = max_payload
        self._buf = bytearray()
        self._state = self._HASH
        self._n_digits = 0
        self._length = 0
        self._payload: bytes | None = None
        self._seen = bytearray()  # the header so far, for error messages
        self._handlers = {
            self._HASH: self._on_hash,
            self._DIGITS: self._on_digits,
            self._LENGTH: self._on_length,
            self._PAYLOAD: self._on_payload,
            self._TERMINATOR: self._on_terminator,
            self._DONE: self._on_done,
        }

    @property
    def declared_length(self) -> int | None:
        """The payload length from the header, once the header has been read."""
        return self._length if self._state >= self._PAYLOAD else None

    def feed(self, data: bytes) -> None:
        """Add bytes that have arrived (any number, including none)."""
        self._buf += data

    def bytes_needed(self) -> int:
        """How many more bytes are certainly needed before `next` can return the payload."""
        have = len(self._buf)
        if self._state == self._HASH:
            need = 2
        elif self._state == self._DIGITS:
            need = 1
        elif self._state == self._LENGTH:
            need = self._n_digits
        elif self._state == self._PAYLOAD:
            need = self._length + len(self.terminator)
        elif self._state == self._TERMINATOR:
            need = len(self.terminator)
        else:
            return 0
        return max(1, need - have) if need > have else 0

    def next(self) -> bytes | _NeedData:
        """The payload if the block is complete, else `NEED_DATA`."""
        while True:
            progressed = self._handlers[self._state]()
            if self._state == self._DONE:
                self._on_done()
                assert self._payload is not None
                return self._payload
            if not progressed:
                return NEED_DATA

    # -- state handlers: each consumes what it can from the buffer, True if it moved on --

    def _fail(self, what: str, got: bytes) -> ReplyError:
        return ReplyError(f"not a definite-length block: {what}", reply=bytes(got))

    def _on_hash(self) -> bool:
        if not self._buf:
            return False
        if self._buf[0:1] != b"#":
            raise self._fail("expected '#' at the start", self._buf)
        self._seen += self._buf[0:1]
        del self._buf[0:1]
        self._state = self._DIGITS
        return True

    def _on_digits(self) -> bool:
        if not self._buf:
            return False
        c = self._buf[0:1]
        self._seen += c
        if c == b"0":
            raise ReplyError(
                "indefinite-length block '#0...' is not supported: over a byte stream its end "
                "cannot be told from a 0x0A data byte",
                reply=bytes(self._seen + self._buf),
            )
        if not c.isdigit():
            raise self._fail("expected a digit 1-9 after '#'", self._seen + self._buf[1:])
        self._n_digits = int(c)
        del self._buf[0:1]
        self._state = self._LENGTH
        return True

    def _on_length(self) -> bool:
        if len(self._buf) < self._n_digits:
            if not bytes(self._buf).isdigit() and self._buf:
                raise self._fail("expected the length digits", self._seen + self._buf)
            return False
        digits = bytes(self._buf[: self._n_digits])
        if not digits.isdigit():
            raise self._fail(f"expected {self._n_digits} length digits", self._seen + self._buf)
        self._seen += digits
        self._length = int(digits)
        if self._length > self.max_payload:
            raise self._fail(
                f"declared length {self._length} exceeds the {self.max_payload}-byte limit", self._seen
            )
        del self._buf[: self._n_digits]
        self._state = self._PAYLOAD
        return True

    def _on_payload(self) -> bool:
        if len(self._buf) < self._length:
            return False
        self._payload = bytes(self._buf[: self._length])
        del self._buf[: self._length]
        self._state = self._TERMINATOR
        return True

    def _on_terminator(self) -> bool:
        term = self.terminator
        have = bytes(self._buf[: len(term)])
        if have != term[: len(have)]:
            raise ReplyError(
                f"after the {self._length}-byte block expected the terminator {term!r}",
                reply=bytes(self._buf),
            )
        if len(have) < len(term):
            return False
        del self._buf[: len(term)]
        self._state = self._DONE
        return True

    def _on_done(self) -> bool:
        if self._buf:
            raise ReplyError(
                f"unexpected bytes after the {self._length}-byte block and its terminator",
                reply=bytes(self._buf),
            )
        return False


def parse_block(data: bytes, *, terminator: bytes = b"\n") -> bytes:
    """Parse one complete block (header, payload, terminator) given all at once."""
    parser = BlockParser(terminator=terminator)
    parser.feed(data)
    payload = parser.next()
    if payload is NEED_DATA:
        raise ReplyError(
            f"definite-length block is incomplete ({parser.bytes_needed()} more bytes expected)",
            reply=data,
        )
    return payload  # type: ignore[return-value]


# -- numbers ---------------------------------------------------------------------------------

#: An IEEE 488.2 decimal numeric (NR1, NR2 or NR3), optionally surrounded by spaces.
_NUMBER = re.compile(r"\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE]\s*[+-]?\d+)?\s*")
#: White space, which a decimal numeric may hold around its exponent (removed before float()).
_WHITESPACE = re.compile(r"\s+")


def _as_text(reply: bytes | str) -> str:
    if isinstance(reply, (bytes, bytearray)):
        try:
            return bytes(reply).decode("ascii")
        except UnicodeDecodeError:
            raise ReplyError("reply is not ASCII text", reply=bytes(reply)) from None
    return reply


def parse_float(reply: bytes | str) -> float:
    """One decimal number (``"1.5"``, ``"+2.50E-03"``); anything else is a `ReplyError`."""
    text = _as_text(reply)
    if not _NUMBER.fullmatch(text):
        raise ReplyError("expected one number", reply=reply)
    value = float(_WHITESPACE.sub("", text))
    if not math.isfinite(value):
        raise ReplyError("reply holds a number too large for float64", reply=reply)
    return value


def parse_int(reply: bytes | str) -> int:
    """One integer; a decimal with a fraction is a `ReplyError`, ``"12.0"`` is accepted."""
    value = parse_float(reply)
    if not math.isfinite(value) or value != int(value):
        raise ReplyError("expected an integer", reply=reply)
    return int(value)


_TRUE_WORDS = {"1", "ON"}
_FALSE_WORDS = {"0", "OFF"}


def parse_bool(reply: bytes | str) -> bool:
    """``1``/``ON`` -> True, ``0``/``OFF`` -> False (case-insensitive); else `ReplyError`."""
    word = _as_text(reply).strip().upper()
    if word in _TRUE_WORDS:
        return True
    if word in _FALSE_WORDS:
        return False
    raise ReplyError("expected a boolean (1, 0, ON or OFF)", reply=reply)


def parse_numbers(
    reply: bytes | str,
    *,
    count: int | None = None,
    multiple_of: int | None = None,
    separator: str = ",",
) -> np.ndarray:
    """Comma-separated decimal numbers -> float64 array.

    An empty (or all-blank) reply is an empty array. Each item must be a decimal number
    (``nan``/``inf`` words are refused). ``count`` demands exactly that many items;
    ``multiple_of`` demands a whole number of sample sets.

    Raises
    ------
    ReplyError
        Naming the first bad item and its position, or the wrong count.
    """
    text = _as_text(reply)
    if not text.strip():
        items: list[str] = []
    else:
        items = text.split(separator)
    if count is not None and len(items) != count:
        raise ReplyError(f"expected {count} numbers, got {len(items)}", reply=reply)
    if multiple_of is not None and multiple_of > 0 and len(items) % multiple_of:
        raise ReplyError(
            f"expected a multiple of {multiple_of} numbers (whole sample sets), got {len(items)}",
            reply=reply,
        )
    try:
        values = np.array(items, dtype=np.float64)
    except ValueError:
        values = None
    if values is None or not np.isfinite(values).all():
        for i, item in enumerate(items):
            if not _NUMBER.fullmatch(item):
                raise ReplyError(f"item {i + 1} ({shorten(item)}) is not a number", reply=reply)
        # every item is a decimal numeric; numpy refuses white space inside one ("1e 5")
        values = np.array([float(_WHITESPACE.sub("", item)) for item in items], dtype=np.float64)
        if not np.isfinite(values).all():
            raise ReplyError("reply holds a number too large for float64", reply=reply)
    # numpy accepts some spellings a decimal numeric does not ("1_0", "nan"): check when cheap
    if len(items) <= 64:
        for i, item in enumerate(items):
            if not _NUMBER.fullmatch(item):
                raise ReplyError(f"item {i + 1} ({shorten(item)}) is not a number", reply=reply)
    return values


# -- SYST:ERR? -------------------------------------------------------------------------------


@dataclass(frozen=True)
class ErrorEntry:
    """One entry of an instrument's error queue; code 0 means the queue is empty."""

    code: int
    text: str

    @property
    def is_error(self) -> bool:
        return self.code != 0


_ERROR_REPLY = re.compile(r"\s*([+-]?\d+)\s*(?:,\s*(.*?))?\s*")


def parse_error_reply(reply: bytes | str) -> ErrorEntry:
    """``0,"No error"`` -> ErrorEntry(0, "No error"); ``-113,"Undefined header"`` likewise.

    The text is IEEE 488.2 string data (double quotes, ``""`` for a quote inside); an
    unquoted text after the comma is also accepted, as some instruments send it.
    """
    text = _as_text(reply)
    m = _ERROR_REPLY.fullmatch(text)
    if not m:
        raise ReplyError('expected an error-queue reply <code>,"<text>"', reply=reply)
    code = int(m.group(1))
    body = m.group(2) or ""
    if body.startswith('"'):
        if len(body) < 2 or not body.endswith('"'):
            raise ReplyError("error text has an unclosed quote", reply=reply)
        inner = body[1:-1]
        if re.search(r'(?<!")"(?!")', inner.replace('""', "")):
            raise ReplyError("error text has an unpaired quote", reply=reply)
        body = inner.replace('""', '"')
    return ErrorEntry(code, body)


# -- *IDN? -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class Identity:
    """What an instrument says it is (``*IDN?``: maker, model, serial number, firmware)."""

    maker: str
    model: str
    serial: str
    firmware: str

    def __str__(self) -> str:
        parts = [p for p in (self.maker, self.model) if p]
        if self.serial:
            parts.append(f"serial {self.serial}")
        if self.firmware:
            parts.append(f"firmware {self.firmware}")
        return ", ".join(parts) or "(no identity)"


IDN_FIELDS = ("maker", "model", "serial", "firmware")


def parse_idn(reply: bytes | str, fields: tuple[str, ...] = IDN_FIELDS) -> Identity:
    """Split an identity reply into its fields.

    ``fields`` names the comma-separated fields in order (IEEE 488.2 ``*IDN?``: maker, model,
    serial, firmware). A field ``0`` means "not available" and becomes ``""``; fields not named
    are ``""``. A reply with a different number of fields is a `ReplyError`.
    """
    for f in fields:
        if f not in IDN_FIELDS:
            raise ValueError(f"fields: {f!r} is not one of {IDN_FIELDS}")
    text = _as_text(reply).strip()
    parts = [p.strip() for p in text.split(",")]
    if not text or len(parts) != len(fields):
        raise ReplyError(
            f"expected an identity of {len(fields)} comma-separated fields ({', '.join(fields)})",
            reply=reply,
        )
    values = {name: "" for name in IDN_FIELDS}
    for name, part in zip(fields, parts):
        values[name] = "" if part == "0" else part
    return Identity(**values)
