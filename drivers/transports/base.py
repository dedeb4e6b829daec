"""Transports move bytes; this module holds their interface and registry, and picks one from
the resource string.

A transport is the only code that touches I/O. Every transport has the same small interface
(`Transport`): ``write(bytes)``, ``read_line(deadline) -> bytes`` (termination removed),
``read_exact(n, deadline) -> bytes``, ``discard_input()``, ``reconnect()`` and ``close()``.
Each kind registers a factory here by name (`register_transport`); the built-in kinds are the
modules named in `BUILTIN_TRANSPORTS`, imported on first use. A kind whose library is missing
registers as unavailable with a message saying what to install.

Resource strings:

- VISA (pyvisa): ``TCPIP::127.0.0.1::5025::SOCKET``, ``TCPIP0::host::INSTR``,
  ``ASRL/dev/ttyUSB0::INSTR``, ``ASRL3::INSTR``, ``USB0::0x1234::0x5678::SN::INSTR``,
  ``GPIB0::12::INSTR``.
- serial (pyserial): ``COM3``, ``/dev/ttyUSB0``, ``socket://127.0.0.1:7001``, ``loop://``,
  ``rfc2217://host:port`` and pyserial's other URL schemes.
"""

from __future__ import annotations

import importlib
import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

from drivers.deadline import Deadline
from drivers.errors import InterfaceUnavailable


class Transport(Protocol):
    """What every transport offers."""

    resource: str

    def write(self, data: bytes) -> None: ...

    def read_line(self, deadline: Deadline) -> bytes: ...

    def read_exact(self, n: int, deadline: Deadline) -> bytes: ...

    def discard_input(self) -> None: ...

    def reconnect(self) -> None: ...

    def close(self) -> None: ...


@dataclass(frozen=True)
class TransportSpec:
    """How to open a transport; every field but ``resource`` has a default."""

    resource: str
    timeout_s: float = 2.0
    read_termination: bytes = b"\n"
    write_termination: bytes = b"\n"
    baudrate: int | None = None
    chunk_size: int = 1 << 16
    #: VISA library for pyvisa: "@py" (pure Python, the default), "" (any installed library),
    #: a library path, or "file.yaml@sim" for pyvisa-sim.
    visa_backend: str = "@py"
    role: str = ""


Factory = Callable[[TransportSpec], Transport]


@dataclass(frozen=True)
class _Entry:
    factory: Factory | None
    unavailable: str = ""


_REGISTRY: dict[str, _Entry] = {}


def register_transport(kind: str) -> Callable[[Factory], Factory]:
    """Decorator: register ``factory(spec) -> Transport`` under ``kind``."""

    def decorate(factory: Factory) -> Factory:
        _REGISTRY[kind] = _Entry(factory)
        return factory

    return decorate


def register_unavailable(kind: str, message: str) -> None:
    """Register ``kind`` as unusable, with ``message`` saying what to install."""
    _REGISTRY[kind] = _Entry(None, message)


_VISA_PREFIX = re.compile(r"^(TCPIP|ASRL|USB|GPIB|VXI|PXI)\d*(::|/|[A-Za-z0-9])", re.IGNORECASE)
_WINDOWS_PORT = re.compile(r"^COM\d+$", re.IGNORECASE)


def transport_kind(resource: str) -> str:
    """``"visa"`` or ``"serial"`` for a resource string; ValueError naming ``resource`` if neither."""
    if not isinstance(resource, str) or not resource.strip():
        raise ValueError(f"resource: expected a VISA resource or serial port, got {resource!r}")
    text = resource.strip()
    if "://" in text:
        return "serial"
    if _WINDOWS_PORT.match(text) or text.startswith("/dev/"):
        return "serial"
    if _VISA_PREFIX.match(text):
        return "visa"
    raise ValueError(
        f"resource: {resource!r} is neither a VISA resource (TCPIP::host::port::SOCKET, "
        "ASRL...::INSTR, USB...::INSTR, GPIB...::INSTR) nor a serial port (COM3, /dev/ttyUSB0, "
        "socket://host:port, loop://)"
    )


#: Built-in kind -> (the module that registers it, what a missing library means: ``{exc}`` is
#: the ImportError).
BUILTIN_TRANSPORTS: dict[str, tuple[str, str]] = {
    "visa": (
        "drivers.transports.visa",
        "VISA resources need pyvisa and pyvisa-py ({exc}); install them with `pip install pyvisa pyvisa-py`",
    ),
    "serial": (
        "drivers.transports.serial",
        "serial ports need pyserial ({exc}); install it with `pip install pyserial`",
    ),
}


def _load_builtin_transports() -> None:
    for kind, (module, missing) in BUILTIN_TRANSPORTS.items():
        if kind in _REGISTRY:
            continue
        try:
            importlib.import_module(module)  # registers ``kind``
        except ImportError as exc:
            register_unavailable(kind, missing.format(exc=exc))


def available_transports() -> dict[str, str]:
    """Kind -> ``""`` if usable, else the reason it is not."""
    _load_builtin_transports()
    return {kind: entry.unavailable for kind, entry in sorted(_REGISTRY.items())}


def open_transport(spec: TransportSpec) -> Transport:
    """Open the transport the resource string calls for."""
    kind = transport_kind(spec.resource)
    _load_builtin_transports()
    entry = _REGISTRY.get(kind)
    if entry is None or entry.factory is None:
        reason = entry.unavailable if entry else f"no transport registered for {kind!r}"
        raise InterfaceUnavailable(reason, role=spec.role, resource=spec.resource)
    return entry.factory(spec)
