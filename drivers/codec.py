"""Operations to command bytes, reply bytes to values: a profile's commands, applied (no I/O).

`encode` fills a command's placeholders (converting SI values to the instrument's unit) and
appends the write termination. `decode_line` and `decode_block` turn a reply into the value
the driver returns (in SI), dispatching on the reply format through one table.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from drivers import ieee488
from drivers.errors import InstrumentReportedError, ReplyError
from drivers.profile import BLOCK_DTYPES, Command, ErrorPolicy


def encode(command: Command, params: dict[str, Any], write_termination: bytes) -> bytes:
    """The bytes to send for ``command`` with ``params`` (``value`` in SI units).

    Raises
    ------
    ValueError
        A parameter the command needs is missing, unexpected, or not a finite number.
    """
    unknown = set(params) - command.placeholders
    if unknown:
        raise ValueError(
            f"{min(unknown)}: the {command.op!r} command {command.send!r} takes no such parameter"
        )
    missing = command.placeholders - set(params)
    if missing:
        raise ValueError(f"{min(missing)}: the {command.op!r} command needs this parameter")
    values = dict(params)
    for name in ("value", "hz"):
        if name in values:
            v = values[name]
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ValueError(f"{name}: expected a finite number, got {v!r}")
    if "value" in values:
        values["value"] = command.to_instrument(float(values["value"]))
    text = command.send.format(**values)
    try:
        raw = text.encode("ascii")
    except UnicodeEncodeError:
        raise ValueError(f"{command.op}: command {text!r} is not ASCII") from None
    return raw + write_termination


def check_inline_error(policy: ErrorPolicy, line: bytes) -> None:
    """Raise `InstrumentReportedError` if ``line`` is an inline error reply (``ERR 2 bad shutter``)."""
    prefix = policy.reply_prefix
    if not prefix:
        return
    text = line.decode("ascii", errors="replace").strip()
    if not text.upper().startswith(prefix.upper()):
        return
    rest = text[len(prefix) :].strip()
    head, _, tail = rest.partition(" ")
    try:
        code = int(head)
    except ValueError:
        code, tail = 0, rest
    raise InstrumentReportedError(code, tail.strip(), reply=line)


def _ok(command: Command, line: bytes) -> None:
    if line.decode("ascii", errors="replace").strip().upper() != command.token.upper():
        raise ReplyError(f"expected the acknowledgement {command.token!r}", reply=line)


def _enum(command: Command, line: bytes) -> bool:
    word = line.decode("ascii", errors="replace").strip().upper()
    try:
        return command.values[word]
    except KeyError:
        raise ReplyError(f"expected one of {sorted(command.values)}", reply=line) from None


def _text(command: Command, line: bytes) -> str:
    try:
        return line.decode("ascii").strip()
    except UnicodeDecodeError:
        raise ReplyError("reply is not ASCII text", reply=line) from None


def _csv(command: Command, line: bytes) -> np.ndarray:
    values = ieee488.parse_numbers(line, count=command.count)
    return command.to_si(values)


_LINE_DECODERS: dict[str, Callable[[Command, bytes], Any]] = {
    "float": lambda c, line: c.to_si(ieee488.parse_float(line)),
    "int": lambda c, line: ieee488.parse_int(line),
    "bool": lambda c, line: ieee488.parse_bool(line),
    "text": _text,
    "idn": lambda c, line: ieee488.parse_idn(line, c.fields),
    "csv_floats": _csv,
    "ok": _ok,
    "enum": _enum,
}


def decode_line(command: Command, line: bytes, policy: ErrorPolicy) -> Any:
    """The value of a one-line reply (termination already removed)."""
    check_inline_error(policy, line)
    decoder = _LINE_DECODERS.get(command.reply or "")
    if decoder is None:
        raise ValueError(f"command: {command.op!r} has no line reply (reply={command.reply!r})")
    return decoder(command, line)


def decode_block(command: Command, payload: bytes) -> np.ndarray:
    """A block payload -> float64 array in SI (int16 counts times ``scale``)."""
    dtype = np.dtype(BLOCK_DTYPES[command.reply or ""])
    if len(payload) % dtype.itemsize:
        raise ReplyError(
            f"block of {len(payload)} bytes is not a whole number of {dtype.itemsize}-byte values",
            reply=payload,
        )
    raw = np.frombuffer(payload, dtype=dtype)
    if dtype.kind == "i":
        values = raw.astype(np.float64) * command.scale
    else:
        values = raw.astype(np.float64)
    return command.to_si(values)
