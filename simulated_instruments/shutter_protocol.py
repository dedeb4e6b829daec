"""Device side of the QS-2 shutter controller's line protocol (not SCPI), without sockets.

Commands end with CR (a LF, or CR LF, is accepted too); each reply is one line ending with
CR LF. Keywords are case insensitive.

==========  =====================================================  ===========================
command     reply                                                  meaning
==========  =====================================================  ===========================
ID          QS-2 shutter controller,Quillmoor Instruments,fw 2.3    identity
OPEN n      OK                                                     open shutter n
SHUT n      OK                                                     close shutter n
STATE n     OPEN or SHUT                                           position of shutter n
CHOP n f    OK                                                     chop at f Hz (0.1 ... 200);
                                                                   0 stops, leaving it open
other       ERR 1 unknown command / ERR 2 bad shutter / ERR 3 bad value
==========  =====================================================  ===========================
"""

from __future__ import annotations

import re
from typing import Protocol

IDENTITY = "QS-2 shutter controller,Quillmoor Instruments,fw 2.3"
SHUTTERS = (1, 2)
CHOP_RANGE = (0.1, 200.0)
MAX_LINE = 256

_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$")


class ShutterHardware(Protocol):
    """What the protocol drives."""

    def set_open(self, shutter: int, is_open: bool) -> None: ...

    def is_open(self, shutter: int) -> bool: ...

    def chop(self, shutter: int, hz: float) -> None: ...


def _error(code: int, text: str) -> bytes:
    return f"ERR {code} {text}\r\n".encode("ascii")


UNKNOWN = _error(1, "unknown command")
BAD_SHUTTER = _error(2, "bad shutter")
BAD_VALUE = _error(3, "bad value")
OK = b"OK\r\n"


class ShutterSession:
    """Parser state of one connection (sans-I/O): `receive` bytes, get reply lines."""

    def __init__(self, hardware: ShutterHardware, before=None):
        self.hardware = hardware
        self._before = before
        self._buffer = bytearray()
        self._discarding = False

    def receive(self, data: bytes) -> list[bytes]:
        self._buffer += data
        replies = []
        while True:
            m = re.search(rb"[\r\n]", self._buffer)
            if m is None:
                if len(self._buffer) > MAX_LINE:
                    self._buffer.clear()
                    if not self._discarding:
                        replies.append(UNKNOWN)
                    self._discarding = True
                break
            end = m.start()
            line = bytes(self._buffer[:end])
            del self._buffer[: end + 1]
            if self._discarding:
                self._discarding = False
                continue
            if not line.strip():
                continue  # the LF of a CR LF, or an empty line
            replies.append(self.execute(line))
        return replies

    def execute(self, line: bytes) -> bytes:
        """One command line (without its terminator) -> its reply line."""
        try:
            text = line.decode("ascii")
        except UnicodeDecodeError:
            return UNKNOWN
        if not text.isprintable():
            return UNKNOWN
        words = text.split()
        if not words:
            return UNKNOWN
        if self._before is not None:
            self._before()
        verb, args = words[0].upper(), words[1:]
        if verb == "ID":
            return (IDENTITY + "\r\n").encode("ascii") if not args else UNKNOWN
        if verb not in ("OPEN", "SHUT", "STATE", "CHOP"):
            return UNKNOWN
        expected = 2 if verb == "CHOP" else 1
        if len(args) != expected:
            return UNKNOWN
        if not args[0].isdigit() or int(args[0]) not in SHUTTERS:
            return BAD_SHUTTER
        shutter = int(args[0])
        if verb == "OPEN":
            self.hardware.set_open(shutter, True)
            return OK
        if verb == "SHUT":
            self.hardware.set_open(shutter, False)
            return OK
        if verb == "STATE":
            return b"OPEN\r\n" if self.hardware.is_open(shutter) else b"SHUT\r\n"
        if not _NUMBER.match(args[1]):
            return BAD_VALUE
        hz = float(args[1])
        lo, hi = CHOP_RANGE
        if hz != 0.0 and not lo <= hz <= hi:
            return BAD_VALUE
        self.hardware.chop(shutter, hz)
        return OK
