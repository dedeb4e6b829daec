"""The drivers' errors, and the one function that turns transport exceptions into them.

`DriverError` is the root of every error the drivers raise; `DriverConfigError` is a profile,
driver option or quantity that is not what was expected; `InstrumentError` and its subclasses
are instruments that did not do what was asked. An application that uses the drivers builds its
own errors on these (gainbench's ``GainbenchError`` and ``ConfigError`` are these two classes),
so that one ``except`` catches both its own errors and the drivers'.

Every error names the instrument (role and resource), the command that was sent and what came
back (as a ``repr`` cut to about 80 characters), so the message printed by the command line is
enough to find the fault at the bench. `translate_transport_error` is the chokepoint: pyvisa,
pyserial and socket exceptions pass through it and nowhere else.
"""

from __future__ import annotations

import socket

#: How many characters of a command or reply an error message shows.
SHOWN_CHARS = 80


def shorten(data: bytes | str | None, limit: int = SHOWN_CHARS) -> str:
    """``repr`` of ``data`` cut to about ``limit`` characters (with a note of the full length)."""
    if data is None:
        return "nothing"
    if isinstance(data, (bytes, bytearray, memoryview)):
        data = bytes(data)
        if not data:
            return "nothing (0 bytes)"
        if len(data) > limit:
            return f"{bytes(data[:limit])!r}... ({len(data)} bytes)"
        return repr(data)
    if not data:
        return "an empty reply"
    if len(data) > limit:
        return f"{data[:limit]!r}... ({len(data)} characters)"
    return repr(data)


class DriverError(Exception):
    """An error with a message meant for the person at the bench."""


class DriverConfigError(DriverError):
    """A command profile, a driver option or a quantity written as text is not what was expected.

    The message names where the value came from (a file and key, an option) and what was expected.
    """


class InstrumentError(DriverError):
    """An instrument did not do what was asked, or its reply could not be understood.

    Parameters
    ----------
    detail : str
        What went wrong, in a few words.
    role, resource : str
        Which instrument (``"pump"``, ``"TCPIP::127.0.0.1::5025::SOCKET"``).
    command : bytes or str, optional
        The command that was sent.
    reply : bytes or str, optional
        What came back (``b""`` for nothing).
    """

    def __init__(
        self,
        detail: str,
        *,
        role: str = "",
        resource: str = "",
        command: bytes | str | None = None,
        reply: bytes | str | None = None,
    ) -> None:
        super().__init__(detail)
        self.detail = detail
        self.role = role
        self.resource = resource
        self.command = command
        self.reply = reply

    def with_context(
        self,
        *,
        role: str = "",
        resource: str = "",
        command: bytes | str | None = None,
    ) -> InstrumentError:
        """Fill in the instrument and command where they are not yet known; returns self."""
        if not self.role:
            self.role = role
        if not self.resource:
            self.resource = resource
        if self.command is None and command is not None:
            self.command = command
        return self

    def instrument(self) -> str:
        """``"pump instrument (TCPIP::...)"``, or what is known of it."""
        if self.role and self.resource:
            return f"{self.role} instrument ({self.resource})"
        if self.role:
            return f"{self.role} instrument"
        if self.resource:
            return f"instrument {self.resource}"
        return "instrument"

    def __str__(self) -> str:
        parts = [f"{self.instrument()}: {self.detail}"]
        if self.command is not None:
            parts.append(f"sent {shorten(_strip_newline(self.command))}")
        if self.reply is not None:
            parts.append(f"got {shorten(self.reply)}")
        return "; ".join(parts)


class InstrumentTimeout(InstrumentError):
    """No complete reply arrived before the deadline."""


class ReplyError(InstrumentError):
    """A reply arrived but is not what the profile says it should be (garbled, wrong count, ...)."""


class TruncatedBlock(InstrumentTimeout, ReplyError):
    """A definite-length block stopped before the length its header declares, until the deadline.

    Both a timeout and a reply error: the session treats it as a timeout (it reconnects, so
    late bytes of the cut block cannot be read as the next reply, and resends a command that
    is safe to repeat), and a caller that catches `ReplyError` sees a reply that is not what
    was expected, never a short array.
    """


class ConnectionLost(InstrumentError):
    """The connection to the instrument dropped, was refused, or the port went away."""


class InstrumentReportedError(InstrumentError):
    """The instrument reported an error (``SYST:ERR?`` queue not empty, or an error reply).

    Attributes
    ----------
    code : int
        The instrument's error code (SCPI codes are negative, device codes positive).
    text : str
        The instrument's error text.
    others : tuple of (int, str)
        Further entries drained from the queue after the first.
    """

    def __init__(
        self,
        code: int,
        text: str,
        *,
        others: tuple[tuple[int, str], ...] = (),
        role: str = "",
        resource: str = "",
        command: bytes | str | None = None,
        reply: bytes | str | None = None,
    ) -> None:
        detail = f'the instrument reported error {code},"{text}"'
        if others:
            more = ", ".join(f'{c},"{t}"' for c, t in others)
            detail += f" (then also {more})"
        super().__init__(detail, role=role, resource=resource, command=command, reply=reply)
        self.code = code
        self.text = text
        self.others = others


class ProfileError(InstrumentError):
    """A command profile is wrong: names the profile file, the key and what was expected."""

    def __init__(self, path: str, key: str, expected: str) -> None:
        super().__init__(expected)
        self.path = path
        self.key = key
        self.expected = expected

    def __str__(self) -> str:
        where = f"command profile {self.path}"
        if self.key:
            where += f": {self.key}"
        return f"{where}: {self.expected}"


class InterfaceUnavailable(InstrumentError):
    """An optional backend (pyvisa, pyserial, a VISA library) is missing: says what to install."""


def _strip_newline(command: bytes | str) -> bytes | str:
    if isinstance(command, (bytes, bytearray)):
        return bytes(command).rstrip(b"\r\n")
    return command.rstrip("\r\n")


def _visa_error_types() -> tuple[type, type, dict[int, type]]:
    """pyvisa's exception classes and which status codes mean what (empty if pyvisa is absent)."""
    try:
        from pyvisa import constants, errors
    except ImportError:
        return (type(None), type(None), {})
    codes = {
        constants.StatusCode.error_timeout: InstrumentTimeout,
        constants.StatusCode.error_connection_lost: ConnectionLost,
        constants.StatusCode.error_io: ConnectionLost,
        constants.StatusCode.error_invalid_object: ConnectionLost,
        constants.StatusCode.error_closing_failed: ConnectionLost,
        constants.StatusCode.error_resource_not_found: ConnectionLost,
        constants.StatusCode.error_resource_busy: ConnectionLost,
    }
    return (errors.VisaIOError, errors.LibraryError, codes)


def _serial_error_types() -> tuple[type, type]:
    try:
        import serial
    except ImportError:
        return (type(None), type(None))
    return (serial.SerialTimeoutException, serial.SerialException)


def translate_transport_error(
    exc: BaseException,
    *,
    role: str = "",
    resource: str = "",
    command: bytes | str | None = None,
    reply: bytes | str | None = None,
) -> InstrumentError:
    """Turn any exception raised while moving bytes into the matching `InstrumentError`.

    An `InstrumentError` gets the missing context filled in; pyvisa ``VisaIOError`` timeouts
    become `InstrumentTimeout` and its connection and I/O codes `ConnectionLost`; a pyvisa
    ``LibraryError`` (no VISA library) becomes `InterfaceUnavailable`; pyserial write timeouts
    become `InstrumentTimeout` and other ``SerialException`` `ConnectionLost`; ``socket.timeout``
    becomes `InstrumentTimeout` and any other ``OSError`` `ConnectionLost`. Anything else is
    returned as a plain `InstrumentError` naming the exception type.
    """
    ctx = {"role": role, "resource": resource, "command": command, "reply": reply}
    if isinstance(exc, InstrumentError):
        return exc.with_context(role=role, resource=resource, command=command)
    visa_io, visa_library, visa_codes = _visa_error_types()
    serial_timeout, serial_error = _serial_error_types()
    if isinstance(exc, visa_library):
        return InterfaceUnavailable(
            f"the VISA library could not be loaded ({exc}); install pyvisa-py "
            '(`pip install pyvisa-py`) and use backend "@py", or install a vendor VISA library',
            **ctx,
        )
    if isinstance(exc, visa_io):
        code = getattr(exc, "error_code", None)
        kind = visa_codes.get(code, InstrumentError)
        text = getattr(exc, "description", "") or str(exc)
        abbreviation = getattr(exc, "abbreviation", "")
        if kind is InstrumentTimeout:
            return InstrumentTimeout(f"no reply before the timeout ({abbreviation})", **ctx)
        return kind(f"VISA error {abbreviation}: {text}", **ctx)
    if isinstance(exc, serial_timeout):
        return InstrumentTimeout(f"the serial port did not accept the data in time ({exc})", **ctx)
    if isinstance(exc, serial_error):
        return ConnectionLost(f"serial port error: {exc}", **ctx)
    if isinstance(exc, socket.timeout):  # TimeoutError, an OSError: test it first
        return InstrumentTimeout(f"no reply before the timeout ({exc or 'socket timeout'})", **ctx)
    if isinstance(exc, OSError):
        return ConnectionLost(f"connection error: {exc}", **ctx)
    return InstrumentError(f"unexpected {type(exc).__name__}: {exc}", **ctx)
