"""VISA transport (pyvisa): TCPIP sockets, VXI-11, serial, USB and GPIB resources.

The default library is pyvisa-py (``"@py"``), so no vendor VISA is needed; any installed
library works too (``backend=""`` or its path), and pyvisa-sim (``"devices.yaml@sim"``) for
tests. Each library has one pyvisa ``ResourceManager`` per process (`resource_manager`),
shared by every transport opened through it and closed at exit. Reads go straight to the VISA
library's read call in a loop against the deadline:

- `read_line` keeps the termination character enabled, so each low-level read ends at it;
- `read_exact` switches the termination character off, so a 0x0A inside binary data never
  ends a read, and asks for exactly the bytes still missing (as pyvisa's own
  ``read_binary_values`` does once it knows the block length), ``chunk_size`` at a time.

A SOCKET resource has no end-of-message signal, so a read without a termination character
only ends at the timeout: a termination is therefore required.

A dropped TCP connection is not reported by pyvisa-py as such (a read just times out, a
write to a closed socket raises ``OSError``); after a timeout and before each write this
transport looks at the socket underneath, when there is one, to tell "instrument silent"
(`InstrumentTimeout`) from "connection gone" (`ConnectionLost`).
"""

from __future__ import annotations

import atexit
import os
import select
import socket
import threading
from importlib import metadata

import pyvisa
from pyvisa import constants

from drivers.deadline import Deadline
from drivers.errors import (
    ConnectionLost,
    InstrumentTimeout,
    InterfaceUnavailable,
    translate_transport_error,
)
from drivers.transports.base import TransportSpec, register_transport
from drivers.transports.line_buffer import LineBuffer, LineTooLong

#: Shortest timeout handed to the VISA library (ms); 0 would mean "do not wait at all".
_MIN_TIMEOUT_MS = 1

#: The VISA library used when none is named: pyvisa-py, which needs no vendor installation.
DEFAULT_LIBRARY = "@py"

#: Library specification -> its ResourceManager in this process (see `resource_manager`).
_MANAGERS: dict[str, pyvisa.ResourceManager] = {}
_MANAGERS_LOCK = threading.Lock()


def resource_manager(library: str = DEFAULT_LIBRARY, *, role: str = "", resource: str = ""):
    """This process's one ``ResourceManager`` for ``library``, opened on first use.

    Opening a VISA library (loading a vendor library, parsing a pyvisa-sim device file) is
    costly, so every transport opened through the same library shares one manager; they are
    closed at exit (`close_resource_managers`). ``library`` is pyvisa's specification:
    ``"@py"``, ``""`` (pyvisa's own default: an installed vendor library, else pyvisa-py;
    pyvisa is then called with no argument), a library path, or ``"devices.yaml@sim"``.
    ``role`` and ``resource`` name the instrument in errors.

    Raises
    ------
    InterfaceUnavailable
        The library cannot be loaded (no such file, an unknown backend, a bad device file).
    """
    with _MANAGERS_LOCK:
        rm = _MANAGERS.get(library)
        if rm is not None and _is_open(rm):
            return rm
        try:
            rm = pyvisa.ResourceManager(library) if library else pyvisa.ResourceManager()
        except (OSError, ValueError) as exc:  # LibraryError is an OSError; a bad yaml a ValueError
            first_line = (str(exc).strip().splitlines() or [""])[0][:300]
            raise InterfaceUnavailable(
                f'VISA library {library!r} cannot be used ({first_line}); the default "@py" needs '
                'pyvisa-py (`pip install pyvisa-py`), "...@sim" needs pyvisa-sim',
                role=role,
                resource=resource,
            ) from None
        _MANAGERS[library] = rm
        return rm


def _is_open(rm) -> bool:
    try:
        _ = rm.session  # pyvisa raises InvalidSession once the manager is closed
    except pyvisa.errors.InvalidSession:
        return False
    return True


def close_resource_managers() -> None:
    """Close every ResourceManager `resource_manager` opened (and the resources on them)."""
    with _MANAGERS_LOCK:
        managers = list(_MANAGERS.values())
        _MANAGERS.clear()
    for rm in managers:
        try:
            rm.close()
        except Exception:  # at exit a library may already be half torn down; nothing is left to do
            pass


atexit.register(close_resource_managers)


def describe_library(visalib) -> str:
    """What pyvisa opened, in words: ``"pyvisa-py 0.8.1"``, ``"pyvisa-sim 0.7.1 serving
    /lab/devices.yaml"``, ``"vendor VISA library /usr/lib/libvisa.so"`` (from ``rm.visalib``)."""
    package = type(visalib).__module__.split(".")[0]
    path = str(getattr(visalib, "library_path", "") or "")
    if package == "pyvisa_py":
        return f"pyvisa-py {_version('pyvisa-py')}".rstrip()
    if package == "pyvisa_sim":
        return f"pyvisa-sim {_version('pyvisa-sim')}".rstrip() + (f" serving {path}" if path else "")
    if type(visalib).__name__ == "IVIVisaLibrary":
        return f"vendor VISA library {path}".rstrip()
    return f"{type(visalib).__name__} ({package}) {path}".rstrip()


def _version(distribution: str) -> str:
    try:
        return metadata.version(distribution)
    except metadata.PackageNotFoundError:
        return ""


class VisaTransport:
    """A pyvisa message-based resource behind the common transport interface.

    Parameters
    ----------
    resource : str
        VISA resource string, e.g. ``"TCPIP::127.0.0.1::5025::SOCKET"``.
    timeout_s : float
        Default timeout for reads without an explicit deadline (and for opening).
    read_termination, write_termination : bytes
        Line endings; the last byte of ``read_termination`` is the VISA termination character.
    backend : str
        VISA library: ``"@py"`` (default), ``""``, a path, or ``"file.yaml@sim"``; its
        ResourceManager is shared with every other transport on it (`resource_manager`).
    chunk_size : int
        Most bytes asked of the library per read call (64 KiB by default: large enough for
        full speed on loopback, small enough that a read cut off by the timeout loses little).
    baudrate : int, optional
        For ASRL resources.
    role : str
        Names the instrument in errors.
    """

    def __init__(
        self,
        resource: str,
        *,
        timeout_s: float = 2.0,
        read_termination: bytes = b"\n",
        write_termination: bytes = b"\n",
        backend: str = DEFAULT_LIBRARY,
        chunk_size: int = 1 << 16,
        baudrate: int | None = None,
        role: str = "",
    ) -> None:
        if not read_termination:
            raise ValueError(
                "read_termination: a VISA read without a termination character only ends at the "
                "timeout; give one (e.g. b'\\n')"
            )
        if not isinstance(chunk_size, int) or chunk_size < 1:
            raise ValueError(f"chunk_size: expected a positive int, got {chunk_size!r}")
        if timeout_s <= 0:
            raise ValueError(f"timeout_s: expected > 0, got {timeout_s!r}")
        self.resource = resource
        self.role = role
        self.timeout_s = float(timeout_s)
        self.read_termination = bytes(read_termination)
        self.write_termination = bytes(write_termination)
        self.backend = backend
        self.chunk_size = chunk_size
        self.baudrate = baudrate
        self._lines = LineBuffer(self.read_termination)  # bytes read past a line's termination
        self._is_serial = resource.strip().upper().startswith("ASRL")
        self._termchar_on: bool | None = None
        self._res = None
        self._rm = resource_manager(self.backend, role=self.role, resource=self.resource)
        #: The library this transport goes through, in words (`describe_library`).
        self.library = describe_library(self._rm.visalib)
        self._open()

    # -- opening -----------------------------------------------------------------------

    def _open(self) -> None:
        kwargs: dict[str, object] = {
            "open_timeout": max(_MIN_TIMEOUT_MS, int(self.timeout_s * 1000)),
        }
        if self.baudrate is not None and self._is_serial:
            kwargs["baud_rate"] = self.baudrate
        try:
            res = self._rm.open_resource(self.resource, **kwargs)
            res.read_termination = None  # this transport strips terminations itself
            res.write_termination = ""
            res.set_visa_attribute(constants.VI_ATTR_TERMCHAR, self.read_termination[-1])
            res.set_visa_attribute(constants.VI_ATTR_TERMCHAR_EN, constants.VI_TRUE)
            if self._is_serial:
                res.set_visa_attribute(constants.VI_ATTR_ASRL_END_IN, constants.VI_ASRL_END_TERMCHAR)
            res.timeout = max(_MIN_TIMEOUT_MS, int(self.timeout_s * 1000))
        except ValueError as exc:  # pyvisa-py: "Please install PyUSB to use this resource type"
            text = " ".join(str(exc).split())
            if "install" in text.lower():
                raise InterfaceUnavailable(
                    f"this kind of VISA resource needs an optional package: {text}",
                    role=self.role,
                    resource=self.resource,
                ) from exc
            raise self._error(exc, "could not open the resource") from exc
        except Exception as exc:  # pyvisa-py and the VISA libraries raise many types on open
            raise self._error(exc, "could not open the resource") from exc
        self._res = res
        self._termchar_on = True
        self._lines.clear()
        self._no_delay()
        problem = self._socket_problem()
        if problem:
            self.close()
            raise ConnectionLost(f"could not connect: {problem}", role=self.role, resource=self.resource)

    def _error(self, exc: BaseException, doing: str) -> Exception:
        err = translate_transport_error(exc, role=self.role, resource=self.resource)
        err.detail = f"{doing}: {err.detail}"
        return err

    # -- the socket underneath (pyvisa-py only) --------------------------------------------

    def _socket(self) -> socket.socket | None:
        res = self._res
        if res is None:
            return None
        sessions = getattr(res.visalib, "sessions", None)
        if not isinstance(sessions, dict):
            return None
        sock = getattr(sessions.get(res.session), "interface", None)
        return sock if isinstance(sock, socket.socket) else None

    def _no_delay(self) -> None:
        """Switch Nagle's algorithm off on a TCP resource.

        Without this a command followed at once by another small write (the error query)
        waits for the instrument's delayed ACK, about 40 ms on Linux. pyvisa-py 0.8 cannot set
        VI_ATTR_TCPIP_NODELAY on SOCKET resources, so its socket is set directly.
        """
        if not self.resource.upper().startswith("TCPIP"):
            return
        sock = self._socket()
        try:
            if sock is not None:
                sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            else:
                self._res.set_visa_attribute(constants.VI_ATTR_TCPIP_NODELAY, constants.VI_TRUE)
        except Exception:  # an optional speed-up: a library without the attribute still works
            pass

    def _socket_problem(self) -> str | None:
        """Why the TCP socket under this resource is unusable, or None (also if there is none)."""
        sock = self._socket()
        if sock is None:
            return None
        try:
            err = sock.getsockopt(socket.SOL_SOCKET, socket.SO_ERROR)
            if err:
                return f"{os.strerror(err)} (errno {err})"
            readable, _, _ = select.select([sock], [], [], 0)
            if readable and sock.recv(1, socket.MSG_PEEK) == b"":
                return "the instrument closed the connection"
        except OSError as exc:
            return str(exc)
        return None

    # -- the interface -----------------------------------------------------------------

    def _session(self):
        if self._res is None:
            raise ConnectionLost("the connection is closed", role=self.role, resource=self.resource)
        return self._res

    def _set_timeout(self, deadline: Deadline) -> None:
        ms = max(_MIN_TIMEOUT_MS, int(deadline.time_left() * 1000))
        self._session().timeout = ms

    def _set_termchar(self, on: bool) -> None:
        """End library reads at the termination character (on) or only at the count (off).

        Serial (ASRL) resources end reads by VI_ATTR_ASRL_END_IN rather than TERMCHAR_EN, so
        both are switched.
        """
        if self._termchar_on is on:
            return
        res = self._session()
        res.set_visa_attribute(constants.VI_ATTR_TERMCHAR_EN, constants.VI_TRUE if on else constants.VI_FALSE)
        if self._is_serial:
            res.set_visa_attribute(
                constants.VI_ATTR_ASRL_END_IN,
                constants.VI_ASRL_END_TERMCHAR if on else constants.VI_ASRL_END_NONE,
            )
        self._termchar_on = on

    def write(self, data: bytes) -> None:
        """Send ``data`` as is (the caller adds the termination)."""
        res = self._session()
        problem = self._socket_problem()
        if problem:
            raise ConnectionLost(problem, role=self.role, resource=self.resource, command=data)
        try:
            res.write_raw(bytes(data))
        except Exception as exc:  # any library or socket failure goes through the chokepoint
            raise translate_transport_error(
                exc, role=self.role, resource=self.resource, command=data
            ) from exc

    def _read_call(self, count: int, deadline: Deadline) -> tuple[bytes, object]:
        res = self._session()
        if deadline.expired():
            raise InstrumentTimeout("no reply before the timeout", role=self.role, resource=self.resource)
        self._set_timeout(deadline)
        try:
            with res.ignore_warning(
                constants.StatusCode.success_max_count_read,
                constants.StatusCode.success_termination_character_read,
                constants.StatusCode.success_device_not_present,
            ):
                data, status = res.visalib.read(res.session, count)
        except Exception as exc:  # VisaIOError, OSError from pyvisa-py sockets, ...
            err = translate_transport_error(exc, role=self.role, resource=self.resource)
            if isinstance(err, InstrumentTimeout):
                problem = self._socket_problem()
                if problem:
                    err = ConnectionLost(problem, role=self.role, resource=self.resource)
            raise err from exc
        return bytes(data), status

    def read_line(self, deadline: Deadline) -> bytes:
        """One reply line, without its termination."""
        self._set_termchar(True)
        while True:
            try:
                line = self._lines.next_line()
            except LineTooLong as exc:
                raise exc.with_context(role=self.role, resource=self.resource) from None
            if line is not None:
                return line
            data, _status = self._read_call(self.chunk_size, deadline)
            self._lines.feed(data)

    def read_exact(self, n: int, deadline: Deadline) -> bytes:
        """Exactly ``n`` bytes (a short read is a timeout, never data; its bytes are dropped)."""
        if n < 0:
            raise ValueError(f"n: expected >= 0, got {n!r}")
        lines = self._lines
        if lines.missing(n):
            self._set_termchar(False)
        try:
            while lines.missing(n):
                try:
                    data, _status = self._read_call(min(self.chunk_size, lines.missing(n)), deadline)
                except InstrumentTimeout as exc:
                    partial = lines.take_all()
                    exc.detail = (
                        f"only {len(partial)} of {n} bytes arrived before the timeout (bytes of an "
                        "unfinished library read are dropped by the VISA library and not counted)"
                    )
                    exc.reply = partial
                    raise
                lines.feed(data)
        except BaseException:
            lines.clear()
            raise
        finally:
            if self._res is not None:
                self._set_termchar(True)
        block = lines.take(n)
        assert block is not None  # nothing is missing
        return block

    def discard_input(self) -> None:
        """Drop unread bytes (after a garbled or late reply), including any still arriving.

        pyvisa-py drains its socket until it has been quiet for 0.1 s; other libraries empty
        their read buffer.
        """
        self._lines.clear()
        res = self._res
        if res is None:
            return
        try:
            res.flush(constants.BufferOperation.discard_read_buffer)
        except Exception:  # not every library supports every flush mask; our buffer is cleared anyway
            pass

    def reconnect(self) -> None:
        """Close and open the resource again."""
        self.close()
        self._open()

    def close(self) -> None:
        """Close the resource (the shared resource manager stays open for other transports)."""
        res, self._res = self._res, None
        self._lines.clear()
        if res is not None:
            try:
                res.close()
            except Exception:  # closing a session whose socket is already gone may fail; it is gone anyway
                pass

    def __repr__(self) -> str:
        return f"VisaTransport({self.resource!r}, backend={self.backend!r})"


@register_transport("visa")
def _open_visa(spec: TransportSpec) -> VisaTransport:
    return VisaTransport(
        spec.resource,
        timeout_s=spec.timeout_s,
        read_termination=spec.read_termination,
        write_termination=spec.write_termination,
        backend=spec.visa_backend,
        chunk_size=spec.chunk_size,
        baudrate=spec.baudrate,
        role=spec.role,
    )
