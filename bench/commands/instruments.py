"""`gainbench instruments`: say which VISA library the bench uses, list visible VISA resources
and serial ports, then open each configured instrument and print its identity, or the reason
it could not be reached."""

from __future__ import annotations

import argparse
import contextlib
import warnings
from collections.abc import Iterator, Mapping

from bench.errors import ConfigError, GainbenchError

NAME = "instruments"
HELP = "list VISA resources and serial ports, and identify each configured instrument"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--config",
        metavar="FILE",
        default=None,
        help="bench file (TOML); default: the built-in simulated bench",
    )
    parser.add_argument(
        "--visa-backend",
        metavar="LIB",
        default=None,
        help="VISA library for listing and opening VISA resources, over the bench file's "
        '[bench] visa_library: "@py" (pyvisa-py, the default), "" (an installed vendor '
        'library), its path, or "devices.yaml@sim" (pyvisa-sim)',
    )
    parser.add_argument(
        "--no-scan",
        action="store_true",
        help="do not list VISA resources and serial ports; only identify the configured instruments",
    )


def visa_resources(backend: str) -> tuple[list[str], str, list[str]]:
    """(resources, "" or the reason they could not be listed, notes from the VISA library)."""
    try:
        import pyvisa
    except ImportError as exc:
        return [], f"pyvisa is not installed ({exc}); install it with `pip install pyvisa pyvisa-py`", []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            found, why = sorted(_list_without_network_discovery(pyvisa, backend)), ""
        except Exception as exc:  # VISA libraries fail in many ways (no library, no USB access, ...)
            found, why = [], f"{type(exc).__name__}: {exc}"
    # UserWarnings say what discovery is missing; ResourceWarnings are pyvisa-py's own litter
    notes = sorted({str(w.message) for w in caught if not issubclass(w.category, ResourceWarning)})
    return found, why, notes


def library_in_use(library: str) -> tuple[str, str]:
    """(what pyvisa opened for ``library``, in words; "" or why it cannot be used)."""
    try:
        from drivers.transports.visa import describe_library, resource_manager
    except ImportError as exc:
        return "", f"pyvisa is not installed ({exc}); install it with `pip install pyvisa pyvisa-py`"
    try:
        return describe_library(resource_manager(library).visalib), ""
    except GainbenchError as exc:
        return "", exc.detail or str(exc)


def print_library(library: str) -> None:
    """``VISA library ('@py'): pyvisa-py 0.8.1``, or why it cannot be used."""
    used, why = library_in_use(library)
    print(f"VISA library ({library!r}): {used or 'cannot be used: ' + why}")


def _list_without_network_discovery(pyvisa, backend: str) -> list[str]:
    """Resources on local buses (serial, USB, GPIB) only.

    pyvisa-py's full listing also searches the network for LAN instruments by sending VXI-11
    broadcasts and mDNS queries to every interface. A tool beside a lab network must not send
    traffic nobody asked for, so TCPIP instruments are never searched for: name them by their
    address in the bench file (``TCPIP::192.0.2.10::5025::SOCKET``). pyvisa-sim's resources
    are its device file's and send nothing, so all of them are listed.
    """
    from drivers.transports.visa import resource_manager

    rm = None if backend in ("@py", "py", "@ivi-py") else resource_manager(backend)
    package = "pyvisa_py" if rm is None else type(rm.visalib).__module__.split(".")[0]
    if package == "pyvisa_py":
        from pyvisa_py.sessions import Session

        found: list[str] = []
        for (interface, _kind), cls in Session.iter_valid_session_classes():
            if interface == pyvisa.constants.InterfaceType.tcpip:
                continue
            try:
                found += cls.list_resources()
            except Exception:  # one bus failing (no USB permissions, ...) must not hide the others
                continue
        return sorted(set(found))
    if package == "pyvisa_sim":
        return list(rm.list_resources("?*"))
    return [r for r in rm.list_resources("?*") if not r.upper().startswith("TCPIP")]


def serial_ports() -> tuple[list[str], str]:
    """(["COM3  USB serial port", ...], "") or ([], the reason they could not be listed)."""
    try:
        from serial.tools import list_ports
    except ImportError as exc:
        return [], f"pyserial is not installed ({exc}); install it with `pip install pyserial`"
    try:
        ports = list_ports.comports()
    except Exception as exc:  # platform enumeration may fail (permissions, missing sysfs)
        return [], f"{type(exc).__name__}: {exc}"
    lines = []
    for port in sorted(ports, key=lambda p: p.device):
        desc = port.description if port.description and port.description != "n/a" else ""
        lines.append(f"{port.device}  {desc}".rstrip())
    return lines, ""


@contextlib.contextmanager
def resolved_resources(cfg) -> Iterator[tuple[Mapping[str, str], str]]:
    """Role -> resource to open; resource "simulated" starts the simulated bench in-process.

    Yields (resources, note); the note says why simulated instruments cannot be reached.
    """
    resources = {role: inst.resource for role, inst in cfg.instruments.items()}
    if not any(r.lower() == "simulated" for r in resources.values()):
        yield resources, ""
        return
    try:
        from simulated_instruments.instrument_servers import SimulatedBench
        from simulated_instruments.setup_config import SimulatorSetupError
    except ImportError as exc:
        if exc.name and exc.name.startswith("simulated_instruments"):
            yield resources, f"the simulated bench cannot be started here ({exc})"
            return
        raise
    try:
        sim_bench = SimulatedBench(cfg)
    except SimulatorSetupError as exc:
        raise ConfigError(str(exc)) from None
    with sim_bench as sim:
        served = dict(sim.resources)
        out = {role: served.get(role, r) if r.lower() == "simulated" else r for role, r in resources.items()}
        yield out, ""


def _visa_kind(resource: str) -> bool:
    from drivers.transports.base import transport_kind

    try:
        return transport_kind(resource) == "visa"
    except ValueError:
        return False


def identify_all(cfg, resources: Mapping[str, str], note: str, backend: str | None) -> int:
    """Open each configured instrument and print its identity; the number that failed.

    VISA instruments open through ``backend`` if given, else the bench's library
    (``[bench] visa_library``); one that names a library of its own says so.
    """
    from drivers.registry import open_instrument

    failed = 0
    for role, inst in cfg.instruments.items():
        resource = resources.get(role, inst.resource)
        library = backend if backend is not None else cfg.visa_library_for(role)
        head = f"  {role:<11} {inst.driver} via {resource} (profile {inst.profile})"
        if backend is None and library != cfg.visa_library and _visa_kind(resource):
            head += f" (VISA library {library!r})"
        if resource.lower() == "simulated":
            print(
                f"{head}\n      not reached: {note or 'the simulated bench gave no resource for this role'}"
            )
            failed += 1
            continue
        options = dict(inst.options)
        try:
            with open_instrument(
                role, inst.driver, resource, inst.profile, inst.timeout, options, backend=library
            ) as drv:
                identity = drv.identify()
                latency = drv.stats.last_latency_s
            print(f"{head}\n      {identity}  (reply in {latency * 1e3:.1f} ms)")
        except GainbenchError as exc:
            print(f"{head}\n      not reached: {exc}")
            failed += 1
    return failed


def run(args: argparse.Namespace) -> int:
    from bench.config import load_bench

    cfg = load_bench(args.config)
    backend = args.visa_backend
    listing = cfg.visa_library if backend is None else backend
    if not args.no_scan:
        print_library(listing)
        found, why, notes = visa_resources(listing)
        print(f"VISA resources ({listing or 'default library'}):")
        if why:
            print(f"  could not list them: {why}")
        for note in notes:
            print(f"  (note: {note})")
        for name in found:
            print(f"  {name}")
        if not found and not why:
            print("  none found (TCPIP SOCKET resources are never listed; name them in the bench file)")
        ports, why = serial_ports()
        print("Serial ports:")
        if why:
            print(f"  could not list them: {why}")
        for line in ports:
            print(f"  {line}")
        if not ports and not why:
            print("  none found")
    with resolved_resources(cfg) as (resources, note):
        if args.no_scan and any(_visa_kind(r) for r in resources.values()):
            print_library(listing)
        print(f"Instruments of {cfg.source}:")
        failed = identify_all(cfg, resources, note, backend)
    return 1 if failed else 0
