"""Device side of SCPI: a small table-driven command parser that never touches a socket.

Everything that decides how an incoming line is understood lives in this file. A `ScpiSession`
is fed bytes (`ScpiSession.receive`) and returns the complete reply messages those bytes
produced; the socket loop around it is a few lines elsewhere. Rules (IEEE 488.2 / SCPI-99):

* messages end with LF (a CR before it is ignored); several commands may share a line,
  separated by ``;``; the replies of the queries of one line are joined with ``;`` and sent as
  one message ending with LF; a line whose queries all failed sends nothing;
* headers are case insensitive; each keyword in its short form (the upper-case letters of the
  table's mnemonic, ``CURR``) or its long form (``CURRENT``); ``[...]`` marks optional keywords;
  a leading ``:`` is allowed; common commands start with ``*``;
* after a ``;`` a header is read from the root; if no root command matches, it is tried
  relative to the previous command's path, as SCPI does (in ``SOUR:MOD:FREQ 10;STAT ON`` the
  second command is ``SOUR:MOD:STAT``);
* parameters follow the header after white space, separated by ``,`` (not inside ``"..."`` or
  ``(...)``);
* errors go to the instrument's `ErrorQueue`: unprintable bytes or a malformed header -100
  (and the rest of the line is dropped), an unknown header -113 (likewise), a refused or
  malformed parameter the handler's own code (the rest of the line still runs). A line longer
  than `MAX_LINE` bytes is dropped with -100.

References
----------
.. [1] IEEE Std 488.2-1992, *Codes, Formats, Protocols, and Common Commands*, ch. 7
   (program message syntax) and 8.7 (definite-length arbitrary block data).
.. [2] SCPI Consortium, *Standard Commands for Programmable Instruments*, vol. 1, 1999,
   ch. 6 (command tree, short and long forms, compound headers).
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

from simulated_instruments.device_errors import (
    COMMAND_ERROR,
    ILLEGAL_VALUE,
    MISSING_PARAMETER,
    PARAMETER_NOT_ALLOWED,
    UNDEFINED_HEADER,
    DeviceError,
    ErrorQueue,
    format_error,
)

MAX_LINE = 1 << 16

Reply = str | bytes
SetHandler = Callable[[list[str]], None]
QueryHandler = Callable[[list[str]], Reply]


@dataclass(frozen=True)
class Command:
    """One row of a command table: a header pattern and what its set and query forms do."""

    pattern: str  # e.g. "SOURce:CURRent:LIMit", "OUTPut[:STATe]", "*IDN"
    set: SetHandler | None = None
    query: QueryHandler | None = None


@dataclass(frozen=True)
class _Node:
    short: str
    long: str
    optional: bool

    def matches(self, token: str) -> bool:
        t = token.upper()
        return t == self.short or t == self.long


_PART = re.compile(r"\[:?[A-Za-z]+\]|:?[A-Za-z]+")


def _compile(pattern: str) -> tuple[_Node, ...]:
    parts = _PART.findall(pattern)
    if not parts or "".join(parts) != pattern or parts[0].startswith(":"):
        raise ValueError(
            f"pattern: {pattern!r} is not a SCPI header pattern such as 'SOURce:CURRent[:LEVel]'"
        )
    nodes = []
    for part in parts:
        word = part.strip("[]:")
        short = "".join(ch for ch in word if ch.isupper())
        nodes.append(_Node(short or word.upper(), word.upper(), part.startswith("[")))
    return tuple(nodes)


def _match(nodes: Sequence[_Node], tokens: Sequence[str]) -> bool:
    if not nodes:
        return not tokens
    head, rest = nodes[0], nodes[1:]
    if tokens and head.matches(tokens[0]) and _match(rest, tokens[1:]):
        return True
    return head.optional and _match(rest, tokens)


class CommandTable:
    """The commands of one instrument: common (``*XXX``) and tree commands."""

    def __init__(self, commands: Iterable[Command]):
        self._common: dict[str, Command] = {}
        self._tree: list[tuple[tuple[_Node, ...], Command]] = []
        for cmd in commands:
            if cmd.pattern.startswith("*"):
                self._common[cmd.pattern.upper()] = cmd
            else:
                self._tree.append((_compile(cmd.pattern), cmd))

    def common(self, name: str) -> Command | None:
        return self._common.get(name.upper())

    def find(self, tokens: Sequence[str]) -> Command | None:
        for nodes, cmd in self._tree:
            if _match(nodes, tokens):
                return cmd
        return None


_TOKEN = re.compile(r"^[A-Za-z][A-Za-z0-9]*$")
_COMMON = re.compile(r"^\*[A-Za-z]+$")
_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$")


def split_outside(text: str, sep: str) -> list[str]:
    """Split ``text`` at ``sep`` where it is not inside ``"..."`` or ``(...)``."""
    parts, current, depth, quoted = [], [], 0, False
    for ch in text:
        if ch == '"':
            quoted = not quoted
        elif not quoted and ch == "(":
            depth += 1
        elif not quoted and ch == ")":
            depth = max(0, depth - 1)
        if ch == sep and not quoted and depth == 0:
            parts.append("".join(current))
            current = []
        else:
            current.append(ch)
    parts.append("".join(current))
    return parts


class ScpiSession:
    """Parser state of one connection to one instrument (sans-I/O; see module docstring).

    Parameters
    ----------
    table : CommandTable
        The instrument's commands.
    errors : ErrorQueue
        The instrument's error queue (shared by all its connections).
    before : callable, optional
        Called before the commands of each line run (e.g. to bring the simulation up to now).
    """

    def __init__(self, table: CommandTable, errors: ErrorQueue, before: Callable[[], None] | None = None):
        self.table = table
        self.errors = errors
        self._before = before
        self._buffer = bytearray()
        self._discarding = False

    def receive(self, data: bytes) -> list[bytes]:
        """Feed received bytes; returns the reply messages of the lines they completed."""
        self._buffer += data
        replies = []
        while True:
            end = self._buffer.find(b"\n")
            if end < 0:
                if len(self._buffer) > MAX_LINE:
                    self._buffer.clear()
                    if not self._discarding:
                        self.errors.push(COMMAND_ERROR)
                    self._discarding = True
                break
            line = bytes(self._buffer[:end])
            del self._buffer[: end + 1]
            if self._discarding or len(line) > MAX_LINE:
                if not self._discarding:
                    self.errors.push(COMMAND_ERROR)
                self._discarding = False
                continue
            reply = self.execute(line)
            if reply is not None:
                replies.append(reply)
        return replies

    def execute(self, line: bytes) -> bytes | None:
        """Run one line (without its LF); the reply message with its LF, or None."""
        text = line.decode("latin-1")
        if text.endswith("\r"):
            text = text[:-1]
        if any((ord(ch) < 32 and ch != "\t") or ord(ch) > 126 for ch in text):
            self.errors.push(COMMAND_ERROR)
            return None
        if not text.strip():
            return None
        if self._before is not None:
            self._before()
        results: list[bytes] = []
        path: list[str] = []
        for unit in split_outside(text, ";"):
            unit = unit.strip()
            if not unit:
                continue
            parts = unit.split(None, 1)
            header = parts[0]
            params = _params(parts[1]) if len(parts) > 1 else []
            query = header.endswith("?")
            name = header[:-1] if query else header
            if name.startswith("*"):
                if not _COMMON.match(name):
                    self.errors.push(COMMAND_ERROR)
                    break
                cmd = self.table.common(name)
            else:
                absolute = name.startswith(":")
                tokens = (name[1:] if absolute else name).split(":")
                if not all(_TOKEN.match(t) for t in tokens):
                    self.errors.push(COMMAND_ERROR)
                    break
                cmd = self.table.find(tokens)
                if cmd is None and not absolute and path:
                    cmd = self.table.find(path + tokens)
                    if cmd is not None:
                        tokens = path + tokens
                path = tokens[:-1]
            handler = None if cmd is None else (cmd.query if query else cmd.set)
            if handler is None:
                self.errors.push(UNDEFINED_HEADER)
                break
            try:
                result = handler(params)
            except DeviceError as exc:
                self.errors.push(exc.code)
                continue
            if query:
                results.append(result if isinstance(result, bytes) else str(result).encode("latin-1"))
        if not results:
            return None
        if len(results) == 1:
            return results[0] + b"\n"
        return b";".join(results) + b"\n"


def _params(text: str) -> list[str]:
    text = text.strip()
    if not text:
        return []
    return [p.strip() for p in split_outside(text, ",")]


# -- parameter helpers (raise DeviceError with the SCPI code) ----------------------------------


def expect(params: list[str], count: int) -> list[str]:
    """Exactly ``count`` parameters, else -109 (missing) or -108 (too many)."""
    if len(params) < count:
        raise DeviceError(MISSING_PARAMETER)
    if len(params) > count:
        raise DeviceError(PARAMETER_NOT_ALLOWED)
    return params


def number(text: str) -> float:
    """A decimal number (``5``, ``-0.25``, ``1.5E-3``), else -224."""
    if not _NUMBER.match(text.strip()):
        raise DeviceError(ILLEGAL_VALUE, f"{text!r} is not a number")
    return float(text)


def integer(text: str) -> int:
    value = number(text)
    if value != int(value):
        raise DeviceError(ILLEGAL_VALUE, f"{text!r} is not a whole number")
    return int(value)


def boolean(text: str) -> bool:
    """``ON``/``OFF``/``1``/``0`` (any case), else -224."""
    t = text.strip().upper()
    if t in ("ON", "1"):
        return True
    if t in ("OFF", "0"):
        return False
    raise DeviceError(ILLEGAL_VALUE, f"{text!r} is not ON, OFF, 1 or 0")


def channel_list(text: str, highest: int) -> list[int]:
    """``(@1,2,3)``, ``(@1:3)``, ``(@3,1)`` -> channel numbers in order, each 1..highest once."""
    m = re.fullmatch(r"\(@([0-9:,\s]+)\)", text.strip())
    if not m:
        raise DeviceError(ILLEGAL_VALUE, f"{text!r} is not a channel list such as (@1,2,3)")
    out: list[int] = []
    for item in m.group(1).split(","):
        item = item.strip()
        rng = re.fullmatch(r"(\d+)(?::(\d+))?", item)
        if not rng:
            raise DeviceError(ILLEGAL_VALUE, f"{item!r} in {text!r}")
        a = int(rng.group(1))
        b = int(rng.group(2)) if rng.group(2) else a
        step = 1 if b >= a else -1
        out.extend(range(a, b + step, step))
    if any(c < 1 or c > highest for c in out) or len(set(out)) != len(out):
        raise DeviceError(ILLEGAL_VALUE, f"{text!r}: channels 1 to {highest}, each once")
    return out


def unquote(text: str) -> str:
    t = text.strip()
    if len(t) >= 2 and t[0] == t[-1] == '"':
        return t[1:-1]
    return t


def fmt(value: float) -> str:
    """A number as SCPI replies carry it (up to 10 significant digits)."""
    return f"{value:.10g}"


def fmt_bool(value: bool) -> str:
    return "1" if value else "0"


def definite_block(payload) -> bytes:
    """IEEE 488.2 definite-length block ``#<d><len><payload>`` (``#10`` when empty).

    ``payload`` is bytes or any buffer (e.g. a C-contiguous numpy array), copied once.
    """
    view = memoryview(payload)
    if view.nbytes == 0:
        return b"#10"
    view = view.cast("B")
    length = str(view.nbytes).encode()
    header = b"#" + str(len(length)).encode() + length
    out = bytearray(len(header) + view.nbytes)
    out[: len(header)] = header
    out[len(header) :] = view
    return bytes(out)


def common_commands(identity: str, reset: Callable[[], None], errors: ErrorQueue) -> list[Command]:
    """*IDN?, *RST, *CLS, *OPC?, SYST:ERR? for an instrument."""

    def idn(params: list[str]) -> str:
        expect(params, 0)
        return identity

    def rst(params: list[str]) -> None:
        expect(params, 0)
        reset()

    def cls(params: list[str]) -> None:
        expect(params, 0)
        errors.clear()

    def opc(params: list[str]) -> str:
        expect(params, 0)
        return "1"

    def err(params: list[str]) -> str:
        expect(params, 0)
        return format_error(*errors.pop())

    return [
        Command("*IDN", query=idn),
        Command("*RST", set=rst),
        Command("*CLS", set=cls),
        Command("*OPC", set=lambda p: None, query=opc),
        Command("SYSTem:ERRor[:NEXT]", query=err),
    ]
