"""The drivers, found by scanning `drivers.instruments`; `open_instrument` builds one from a
bench file's instrument entry.

Every module in ``drivers/instruments/`` is a driver module: each `Driver` subclass defined in
it with a ``DRIVER_NAME`` is registered under that name, for its ``ROLE``::

    class PumpDriver(Driver):
        DRIVER_NAME = "pump-driver"
        ROLE = "pump"

so adding a driver is adding a file. A driver defined elsewhere (a lab's own script) registers
with the `register` decorator. A driver module whose optional dependency is missing registers
as unavailable, with a message that says what to install; asking for it raises
`InterfaceUnavailable` with that message.
"""

from __future__ import annotations

import importlib
import pkgutil
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, TypeVar

import drivers.instruments
from drivers.base import Driver
from drivers.errors import InstrumentError, InterfaceUnavailable
from drivers.profile import load_profile
from drivers.session import Session
from drivers.transports.base import TransportSpec, open_transport

#: The resource string that stands for "start the simulated bench and use its resources".
SIMULATED = "simulated"

#: The VISA library an instrument opens through when none is named: pyvisa-py.
DEFAULT_VISA_LIBRARY = "@py"


@dataclass(frozen=True)
class DriverInfo:
    """One registered driver."""

    name: str
    role: str
    cls: type[Driver] | None
    unavailable: str = ""
    summary: str = ""


_DRIVERS: dict[str, DriverInfo] = {}
_loaded = False

D = TypeVar("D", bound=type[Driver])


def _add(name: str, cls: type[Driver]) -> None:
    if not cls.ROLE:
        raise ValueError(f"name: driver class {cls.__name__} registered as {name!r} has no ROLE")
    summary = (cls.__doc__ or "").strip().splitlines()[0] if cls.__doc__ else ""
    _DRIVERS[name] = DriverInfo(name, cls.ROLE, cls, summary=summary)


def register(name: str) -> Callable[[D], D]:
    """Class decorator: register a `Driver` subclass under ``name`` (its ``ROLE`` must be set)."""

    def decorate(cls: D) -> D:
        cls.DRIVER_NAME = name
        _add(name, cls)
        return cls

    return decorate


def register_unavailable(name: str, role: str, message: str) -> None:
    """Register ``name`` as unusable; ``message`` says what to install."""
    _DRIVERS[name] = DriverInfo(name, role, None, unavailable=message)


def builtin_driver_modules() -> list[str]:
    """The modules of ``drivers/instruments/`` (``"drivers.instruments.pump"``, ...), sorted."""
    package = drivers.instruments
    return sorted(
        f"{package.__name__}.{info.name}"
        for info in pkgutil.iter_modules(package.__path__)
        if not info.name.startswith("_")
    )


def _load_builtin() -> None:
    global _loaded
    if _loaded:
        return
    _loaded = True
    for module_name in builtin_driver_modules():
        try:
            module = importlib.import_module(module_name)
        except ImportError as exc:
            name = module_name.rsplit(".", 1)[-1]
            register_unavailable(
                name,
                "",
                f"the {name} driver needs {exc.name or exc}: install it with `pip install {exc.name}`",
            )
            continue
        for value in vars(module).values():
            if (
                isinstance(value, type)
                and issubclass(value, Driver)
                and value.__module__ == module_name
                and value.DRIVER_NAME
            ):
                _add(value.DRIVER_NAME, value)


def known_drivers() -> dict[str, DriverInfo]:
    """All registered drivers by name (built-in ones included)."""
    _load_builtin()
    return dict(sorted(_DRIVERS.items()))


def driver_class(name: str, *, role: str = "", resource: str = "") -> type[Driver]:
    """The class registered as ``name``; a clear error listing the known names if there is none."""
    drivers = known_drivers()
    info = drivers.get(name)
    if info is None:
        raise InstrumentError(
            f"unknown driver {name!r}; known drivers: {', '.join(drivers) or '(none)'}",
            role=role,
            resource=resource,
        )
    if info.cls is None:
        raise InterfaceUnavailable(info.unavailable, role=role, resource=resource)
    return info.cls


class _Unconnected:
    """A transport that refuses every exchange: a driver built on it can only be checked."""

    resource = "(not connected)"

    def _refuse(self, *args: Any) -> Any:
        raise InstrumentError("not connected: the instrument is only being checked", resource=self.resource)

    write = read_line = read_exact = discard_input = reconnect = _refuse

    def close(self) -> None:
        pass


def check_instrument(role: str, driver: str, profile: str, options: Mapping[str, Any] | None = None) -> None:
    """What `open_instrument` would refuse before sending anything, without opening a transport.

    The driver is known, is available and serves ``role``; the profile exists, loads, and is
    for that role; the driver accepts the options and their values (the same code that
    `open_instrument` runs: the driver is built, on a transport that refuses every exchange).

    Raises
    ------
    InstrumentError
        An unknown or unavailable driver, or a driver for another role (``detail`` says which).
    ProfileError
        The profile cannot be found or is wrong (names its file and key).
    DriverConfigError
        An option the driver does not take, or a value it cannot use (names the option).
    """
    cls = driver_class(driver, role=role)
    if cls.ROLE != role:
        raise InstrumentError(
            f"driver {driver!r} is for the {cls.ROLE!r} role, not {role!r}; drivers for "
            f"{role!r}: {', '.join(n for n, i in known_drivers().items() if i.role == role) or '(none)'}",
            role=role,
        )
    prof = load_profile(profile, role=cls.ROLE, driver=cls.DRIVER_NAME)
    merged: dict[str, Any] = {**prof.options, **(options or {})}
    transport = _Unconnected()
    session = Session(
        prof, transport, role=role, resource=transport.resource, timeout_s=prof.transport.timeout_s
    )
    cls(session, merged)


def open_instrument(
    role: str,
    driver: str,
    resource: str,
    profile: str,
    timeout_s: float | None = None,
    options: Mapping[str, Any] | None = None,
    *,
    backend: str | None = None,
) -> Driver:
    """Open one instrument and return its driver.

    Parameters
    ----------
    role : str
        The instrument's role in the bench file (``"pump"``); names it in errors.
    driver : str
        Registered driver name (``"pump-driver"``).
    resource : str
        VISA resource or serial port. ``"simulated"`` must be resolved to a real resource
        first (the simulated bench gives one per role).
    profile : str
        Built-in profile name or path of a profile file.
    timeout_s : float, optional
        Deadline of one exchange; the profile's ``[transport] timeout`` if not given.
    options : mapping, optional
        Driver options from the bench file; they override the profile's ``[options]``.
    backend : str, optional
        VISA library for a VISA resource: ``"@py"`` (pyvisa-py, the default), ``""`` (pyvisa's
        default: the installed vendor library), a library path, or ``"file.yaml@sim"``
        (pyvisa-sim). Overrides the ``visa_backend`` option; None (not ``""``) means not given.
    """
    if not isinstance(resource, str) or not resource.strip():
        raise InstrumentError(f"no resource given for driver {driver!r}", role=role)
    if resource.strip().lower() == SIMULATED:
        raise InstrumentError(
            "resource 'simulated' stands for the simulated bench: start it first and use the "
            "resource it gives for this role",
            role=role,
            resource=resource,
        )
    cls = driver_class(driver, role=role, resource=resource)
    prof = load_profile(profile, role=cls.ROLE, driver=cls.DRIVER_NAME)
    if timeout_s is not None and not (isinstance(timeout_s, (int, float)) and timeout_s > 0):
        raise ValueError(f"timeout_s: expected a number of seconds > 0, got {timeout_s!r}")
    timeout = float(timeout_s) if timeout_s is not None else prof.transport.timeout_s
    merged: dict[str, Any] = {**prof.options, **(options or {})}
    visa_backend = backend if backend is not None else merged.get("visa_backend", DEFAULT_VISA_LIBRARY)
    spec = TransportSpec(
        resource=resource,
        timeout_s=timeout,
        read_termination=prof.transport.read_termination,
        write_termination=prof.transport.write_termination,
        baudrate=prof.transport.baudrate,
        chunk_size=prof.transport.chunk_size,
        visa_backend=str(visa_backend),
        role=role,
    )
    try:
        transport = open_transport(spec)
    except ValueError as exc:  # a resource string of no known kind
        raise InstrumentError(str(exc), role=role, resource=resource) from None
    session = Session(prof, transport, role=role, resource=resource, timeout_s=timeout)
    try:
        return cls(session, merged)
    except BaseException:
        session.close()
        raise


def visa_library_of(driver: Driver) -> str | None:
    """The VISA library ``driver``'s instrument was opened through, in words (``"pyvisa-py
    0.8.1"``), or None when its transport is not a VISA one (a serial port)."""
    library = getattr(getattr(driver.session, "transport", None), "library", None)
    return library if isinstance(library, str) else None
