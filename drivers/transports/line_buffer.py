"""The framing every line transport shares, without I/O: bytes in, lines and blocks out.

A transport reads whatever the port gives and `feed` s it here; `next_line` hands back one
reply line without its terminator once the whole line has arrived (however the bytes were cut
into reads, a terminator split across two of them included), and `take` hands back exactly
``n`` bytes once they have arrived, terminator bytes in them or not, for the binary part of an
IEEE 488.2 definite-length block (``#3123`` then 123 bytes), whose length the caller has read
from its header. Both return None while the data is still incomplete, and consume nothing then.

The terminator is configurable (``b"\\n"``, ``b"\\r\\n"``, ...) and matched as a whole: with
``b"\\r\\n"`` a bare ``b"\\n"`` is part of the line; with ``b"\\n"`` a ``b"\\r"`` before it is kept
in the line (as the transports have always done; the protocol code strips what it must).

A line longer than ``max_line`` bytes is refused (`LineTooLong`) instead of buffered without
end: a port that streams bytes without a terminator (a binary reply read as a line, a wrong
terminator in the profile) would otherwise grow the buffer until the deadline.

::

    buf = LineBuffer(b"\\r\\n")
    buf.feed(b"1.5\\r")
    buf.next_line()        # None: the terminator is not complete
    buf.feed(b"\\n#14ab")
    buf.next_line()        # b"1.5"
    buf.take(3)            # b"#14"
    buf.take(4)            # None: only 2 of the 4 block bytes have arrived
"""

from __future__ import annotations

from drivers.errors import ReplyError

#: Longest line kept by default (64 MiB): far above any reply of the built-in profiles (an
#: ASCII fetch of 65536 sample sets of three channels is about 3 MB), far below memory trouble.
MAX_LINE_BYTES = 1 << 26


class LineTooLong(ReplyError):
    """More than ``max_line`` bytes arrived without a terminator."""


class LineBuffer:
    """Bytes received and not yet handed on, cut into lines or taken as blocks.

    Parameters
    ----------
    terminator : bytes
        End of a line; at least one byte.
    max_line : int
        Most bytes a line may have (terminator not counted) before `next_line` refuses it.
    """

    def __init__(self, terminator: bytes = b"\n", *, max_line: int = MAX_LINE_BYTES) -> None:
        if not isinstance(terminator, (bytes, bytearray)) or not terminator:
            raise ValueError(f"terminator: expected one or more bytes such as b'\\n', got {terminator!r}")
        if isinstance(max_line, bool) or not isinstance(max_line, int) or max_line < 1:
            raise ValueError(f"max_line: expected a positive number of bytes, got {max_line!r}")
        self.terminator = bytes(terminator)
        self.max_line = max_line
        self._data = bytearray()
        #: Bytes at the front of ``_data`` already searched for a terminator without one found
        #: (so a long line fed in small reads is searched once, not once per read).
        self._searched = 0

    def __len__(self) -> int:
        """Bytes received and not yet handed on."""
        return len(self._data)

    def pending(self) -> bytes:
        """A copy of the bytes received and not yet handed on (for an error message)."""
        return bytes(self._data)

    def feed(self, data: bytes) -> None:
        """Add bytes as they came from the port (any length, empty included)."""
        self._data += data

    def next_line(self) -> bytes | None:
        """The next complete line without its terminator, or None if none has arrived yet.

        Raises
        ------
        LineTooLong
            More than ``max_line`` bytes are waiting and none of them ends a line (they stay
            buffered: `clear` drops them).
        """
        term = self.terminator
        start = max(0, self._searched - len(term) + 1)
        end = self._data.find(term, start)
        if end < 0:
            self._searched = len(self._data)
            if len(self._data) > self.max_line:
                raise LineTooLong(
                    f"more than {self.max_line} bytes arrived without the line terminator {term!r}",
                    reply=bytes(self._data[:80]),
                )
            return None
        if end > self.max_line:
            raise LineTooLong(
                f"a line of {end} bytes is longer than the {self.max_line} allowed",
                reply=bytes(self._data[:80]),
            )
        line = bytes(self._data[:end])
        del self._data[: end + len(term)]
        self._searched = 0
        return line

    def take(self, n: int) -> bytes | None:
        """Exactly the next ``n`` bytes, terminators in them or not, or None if fewer have arrived."""
        if isinstance(n, bool) or not isinstance(n, int) or n < 0:
            raise ValueError(f"n: expected a number of bytes >= 0, got {n!r}")
        if len(self._data) < n:
            return None
        out = bytes(self._data[:n])
        del self._data[:n]
        self._searched = 0
        return out

    def missing(self, n: int) -> int:
        """How many more bytes `take` of ``n`` needs (0 if it would succeed now)."""
        return max(0, n - len(self._data))

    def take_all(self) -> bytes:
        """Every byte waiting, whatever it is; the buffer is then empty."""
        out = bytes(self._data)
        self.clear()
        return out

    def clear(self) -> None:
        """Drop every byte waiting (after a garbled or late reply)."""
        self._data.clear()
        self._searched = 0
