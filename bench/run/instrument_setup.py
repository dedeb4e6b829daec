"""Opening a bench's instruments for a run, and the simulated bench behind them when the bench
file says ``resource = "simulated"``; closing them again.

The functions fill the dictionaries they are given as they go, so that a failure halfway leaves
the caller holding what was opened, for it to close (`close_instruments`).
"""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Mapping
from typing import Any

from bench.config import BenchConfig
from bench.errors import ConfigError, GainbenchError
from bench.records import Event
from bench.run.errors import MeasurementError
from bench.run.simulator_process import SimulatorProcess
from drivers.registry import open_instrument, visa_library_of
from simulated_instruments.instrument_servers import SimulatedBench
from simulated_instruments.setup_config import SimulatorSetupError

#: The resource string of an instrument served by the simulated bench.
SIMULATED = "simulated"


def configured_resources(cfg: BenchConfig) -> dict[str, str]:
    """Each role's resource as the bench file gives it."""
    return {role: inst.resource for role, inst in cfg.instruments.items()}


def needs_simulator(resources: Mapping[str, str]) -> bool:
    return any(r == SIMULATED for r in resources.values())


def make_simulator(
    cfg: BenchConfig, *, speed: float, faults: tuple[str, ...], seed: int | None, in_process: bool
):
    """The simulated bench, not yet started (enter it as a context manager): in this process, or
    (the default for runs) in a process of its own."""
    if not in_process:
        return SimulatorProcess(cfg, speed=speed, faults=faults, seed=seed)
    try:
        return SimulatedBench(cfg, speed=speed, faults=faults, seed=seed)
    except SimulatorSetupError as exc:  # the simulator's own error, said as a bench-file one
        raise ConfigError(str(exc)) from None


def simulated_resources(resources: Mapping[str, str], sim) -> dict[str, str]:
    """``resources`` with every ``"simulated"`` replaced by the started simulator's address."""
    return {role: (sim.resources[role] if r == SIMULATED else r) for role, r in resources.items()}


def open_instruments(
    cfg: BenchConfig,
    resources: Mapping[str, str],
    instruments: dict[str, Any],
    identities: dict[str, str],
    on_event: Callable[[Event], None],
) -> None:
    """Open every configured instrument that has a resource through the driver registry, ask
    its identity and empty its error queue (what it holds is from before this run; noted as an
    event through ``on_event``). Fills ``instruments`` and ``identities`` by role. VISA
    instruments open through the bench's ``[bench] visa_library``."""
    for role, inst in cfg.instruments.items():
        if role not in resources:
            continue
        driver = open_instrument(
            role,
            inst.driver,
            resources[role],
            inst.profile,
            inst.timeout,
            dict(inst.options),
            backend=cfg.visa_library_for(role),
        )
        instruments[role] = driver
        try:
            identities[role] = str(driver.identify())
        except GainbenchError as exc:
            raise MeasurementError(f"{role} at {resources[role]}: no identity ({exc})") from exc
        clear_error_queue(role, driver, on_event)


def clear_error_queue(role: str, driver, on_event: Callable[[Event], None]) -> None:
    """Empty an instrument's error queue at start: what it holds is from before this run
    (and would otherwise be blamed on this run's first setting). Noted as a run event."""
    try:
        entries = driver.instrument_errors()
    except GainbenchError as exc:
        raise MeasurementError(f"{role}: reading its error queue at start failed ({exc})") from exc
    if entries:
        listed = "; ".join(f"{e.code}, {e.text!r}" for e in entries)
        on_event(
            Event(
                0.0,
                "run",
                f"{role}: error queue at start held (from before this run, cleared): {listed}",
                data={"source": role, "errors": [[e.code, e.text] for e in entries]},
            )
        )


def open_truth_connection(cfg: BenchConfig, sim):
    """A detector connection of its own to the simulator, for its truth queries."""
    inst = cfg.instruments["detector"]
    return open_instrument(
        "detector",
        inst.driver,
        sim.resources["detector"],
        inst.profile,
        inst.timeout,
        dict(inst.options),
        backend=cfg.visa_library_for("detector"),
    )


def visa_libraries(instruments: Mapping[str, Any]) -> dict[str, str]:
    """Role -> the VISA library its instrument was opened through, in words, for each one
    opened through VISA (stored in a run's metadata beside the instruments' identities)."""
    out = {}
    for role, driver in instruments.items():
        library = visa_library_of(driver)
        if library is not None:
            out[role] = library
    return out


def close_instruments(instruments: Mapping[str, Any], sim) -> None:
    """Stop the detector's acquisition, close every instrument, then stop the simulator (if
    any). Failures are ignored: this runs while a run closes."""
    for role, inst in list(instruments.items()):
        with contextlib.suppress(Exception):
            if role == "detector":
                inst.stop()
        with contextlib.suppress(Exception):
            inst.close()
    if sim is not None:
        with contextlib.suppress(Exception):
            sim.__exit__(None, None, None)
