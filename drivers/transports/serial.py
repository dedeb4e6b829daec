"""Serial transport (pyserial): device paths, ``COMn``, ``socket://host:port``, ``loop://``.

pyserial's ``serial_for_url`` opens every kind. Two of its habits are handled here: a read
that times out returns short data instead of raising (so every length is checked, and a short
read is an `InstrumentTimeout`), and ``readline`` keeps waiting as long as bytes trickle in
(so lines are cut by a `LineBuffer` from what the port gives, against one `Deadline` on the
monotonic clock).
"""

from __future__ import annotations

import socket

import serial

from drivers.deadline import Deadline
from drivers.errors import ConnectionLost, InstrumentTimeout, translate_transport_error
from drivers.transports.base import TransportSpec, register_transport
from drivers.transports.line_buffer import LineBuffer, LineTooLong

#: Bytes taken per non-blocking read while assembling a line.
_LINE_CHUNK = 4096


class SerialTransport:
    """A pyserial port behind the common transport interface.

    Parameters
    ----------
    port_or_url : str
        ``"COM3"``, ``"/dev/ttyUSB0"``, ``"socket://127.0.0.1:7001"``, ``"loop://"``, ...
    baudrate : int
        Line speed (ignored by ``socket://`` and ``loop://``).
    timeout_s : float
        Default wait for writes.
    read_termination : bytes
        End of a reply line (``b"\\r\\n"``); must not be empty.
    chunk_size : int
        Most bytes asked of the port per read call in `read_exact`.
    role : str
        Names the instrument in errors.
    """

    def __init__(
        self,
        port_or_url: str,
        *,
        baudrate: int = 9600,
        timeout_s: float = 2.0,
        read_termination: bytes = b"\n",
        write_termination: bytes = b"\n",
        chunk_size: int = 1 << 16,
        role: str = "",
    ) -> None:
        if not read_termination:
            raise ValueError("read_termination: a line protocol needs a termination, e.g. b'\\r\\n'")
        if not isinstance(baudrate, int) or baudrate <= 0:
            raise ValueError(f"baudrate: expected a positive int, got {baudrate!r}")
        if not isinstance(chunk_size, int) or chunk_size < 1:
            raise ValueError(f"chunk_size: expected a positive int, got {chunk_size!r}")
        if timeout_s <= 0:
            raise ValueError(f"timeout_s: expected > 0, got {timeout_s!r}")
        self.resource = port_or_url
        self.role = role
        self.baudrate = baudrate
        self.timeout_s = float(timeout_s)
        self.read_termination = bytes(read_termination)
        self.write_termination = bytes(write_termination)
        self.chunk_size = chunk_size
        self._lines = LineBuffer(self.read_termination)
        self._port: serial.SerialBase | None = None
        self._open()

    def _open(self) -> None:
        try:
            self._port = serial.serial_for_url(
                self.resource,
                baudrate=self.baudrate,
                timeout=self.timeout_s,
                write_timeout=self.timeout_s,
            )
        except Exception as exc:  # SerialException, ValueError (bad URL), OSError
            if isinstance(exc, ValueError):
                raise ConnectionLost(
                    f"could not open the port: {exc}", role=self.role, resource=self.resource
                ) from exc
            err = translate_transport_error(exc, role=self.role, resource=self.resource)
            err.detail = f"could not open the port: {err.detail}"
            raise err from exc
        self._lines.clear()
        self._no_delay()

    def _no_delay(self) -> None:
        """Switch Nagle's algorithm off on a ``socket://`` port (pyserial leaves it on).

        Without this a command followed at once by another small write (an error query)
        waits for the instrument's delayed ACK, about 40 ms on Linux.
        """
        sock = getattr(self._port, "_socket", None)
        if isinstance(sock, socket.socket):
            try:
                sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            except OSError:
                pass  # an unusable socket shows up on the first write or read

    def _live(self) -> serial.SerialBase:
        if self._port is None or not self._port.is_open:
            raise ConnectionLost("the port is closed", role=self.role, resource=self.resource)
        return self._port

    def _read(self, size: int, timeout: float) -> bytes:
        port = self._live()
        try:
            if port.timeout != timeout:
                port.timeout = timeout
            return port.read(size)
        except Exception as exc:  # pyserial raises SerialException or OSError
            raise translate_transport_error(exc, role=self.role, resource=self.resource) from exc

    def write(self, data: bytes) -> None:
        """Send ``data`` as is (the caller adds the termination)."""
        port = self._live()
        try:
            written = port.write(bytes(data))
            port.flush()
        except Exception as exc:  # SerialTimeoutException, SerialException, OSError
            raise translate_transport_error(
                exc, role=self.role, resource=self.resource, command=data
            ) from exc
        if written is not None and written != len(data):
            raise ConnectionLost(
                f"only {written} of {len(data)} bytes were written",
                role=self.role,
                resource=self.resource,
                command=data,
            )

    def _next_line(self) -> bytes | None:
        try:
            return self._lines.next_line()
        except LineTooLong as exc:
            raise exc.with_context(role=self.role, resource=self.resource) from None

    def read_line(self, deadline: Deadline) -> bytes:
        """One reply line, without its termination, however slowly its bytes arrive."""
        while True:
            line = self._next_line()
            if line is not None:
                return line
            # take whatever has arrived without waiting, then wait for one more byte
            self._lines.feed(self._read(_LINE_CHUNK, 0))
            line = self._next_line()
            if line is not None:
                return line
            left = deadline.time_left()
            if left <= 0:
                raise InstrumentTimeout(
                    "no complete reply line before the timeout",
                    role=self.role,
                    resource=self.resource,
                    reply=self._lines.pending(),
                )
            self._lines.feed(self._read(1, left))

    def read_exact(self, n: int, deadline: Deadline) -> bytes:
        """Exactly ``n`` bytes (a short read is a timeout, never data; its bytes are dropped)."""
        if n < 0:
            raise ValueError(f"n: expected >= 0, got {n!r}")
        lines = self._lines
        try:
            while lines.missing(n):
                left = deadline.time_left()
                if left <= 0:
                    partial = lines.take_all()
                    raise InstrumentTimeout(
                        f"only {len(partial)} of {n} bytes arrived before the timeout",
                        role=self.role,
                        resource=self.resource,
                        reply=partial,
                    )
                lines.feed(self._read(min(self.chunk_size, lines.missing(n)), left))
        except BaseException:
            lines.clear()
            raise
        block = lines.take(n)
        assert block is not None  # nothing is missing
        return block

    def discard_input(self) -> None:
        """Drop unread bytes (after a garbled or late reply)."""
        self._lines.clear()
        if self._port is not None and self._port.is_open:
            try:
                self._port.reset_input_buffer()
            except Exception:  # some URL handlers cannot; our own buffer is cleared anyway
                pass

    def reconnect(self) -> None:
        """Close and open the port again."""
        self.close()
        self._open()

    def close(self) -> None:
        port, self._port = self._port, None
        self._lines.clear()
        if port is not None:
            try:
                port.close()
            except Exception:  # closing a port whose device vanished may fail; it is closed anyway
                pass

    def __repr__(self) -> str:
        return f"SerialTransport({self.resource!r}, baudrate={self.baudrate})"


@register_transport("serial")
def _open_serial(spec: TransportSpec) -> SerialTransport:
    return SerialTransport(
        spec.resource,
        baudrate=spec.baudrate or 9600,
        timeout_s=spec.timeout_s,
        read_termination=spec.read_termination,
        write_termination=spec.write_termination,
        chunk_size=spec.chunk_size,
        role=spec.role,
    )
