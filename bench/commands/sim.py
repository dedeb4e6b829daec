"""``gainbench sim serve``: run the simulated bench on loopback in the foreground."""

from __future__ import annotations

import argparse
import math
import signal
import sys
import threading

from bench.config import load_bench, parse_overrides
from bench.errors import ConfigError

NAME = "sim"
HELP = "Run the simulated bench (invented instruments, served on 127.0.0.1 only)."

FAULT_HELP = (
    "schedule a fault, KIND[:ROLE][@TIME][+DURATION] (repeatable). TIME is simulated seconds "
    "since start (3s, 500ms; default 0). Kinds: interlock (the pump's interlock opens; "
    "+DURATION closes it again), overtemp (the mount's TEC fails, the driver trips at 45 degC), "
    "saturate (the probe input is driven past full scale), drop:ROLE (the instrument closes its "
    "client connections once), garble:ROLE (replies corrupted for DURATION, else one reply), "
    "slow:ROLE (replies held back 3 s, for DURATION, else one reply), error[:ROLE] (the "
    "instrument pushes error 300). Examples: interlock@3s, garble:detector@2s+0.5s, slow:pump@3s+1s"
)


def configure(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="sim_command", metavar="ACTION")
    serve = sub.add_parser(
        "serve",
        help="serve the simulated instruments until Ctrl-C",
        description="Start the simulated bench and print one line per instrument, ROLE RESOURCE "
        "(a VISA resource string or a pyserial URL), then serve until Ctrl-C or SIGTERM. The "
        "instruments and their maker are invented for the demo; the simulated pump is switched "
        "off on exit.",
    )
    serve.add_argument(
        "--config",
        metavar="FILE",
        default=None,
        help="bench file with a [simulation] table (default: the built-in demo bench)",
    )
    serve.add_argument(
        "--speed", type=float, default=1.0, metavar="N", help="simulated seconds per real second (default 1)"
    )
    serve.add_argument("--seed", type=int, default=None, help="random seed (default: the bench file's)")
    serve.add_argument("--fault", action="append", default=[], metavar="SPEC", help=FAULT_HELP)
    serve.add_argument(
        "--set",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        dest="overrides",
        help="change a key of the bench file for this run, e.g. simulation.drift_per_hour=0 (repeatable)",
    )
    serve.add_argument(
        "--until-stdin-closes",
        action="store_true",
        help="also stop when standard input closes, and ignore Ctrl-C (for a parent process "
        "that starts the simulator: it stops with its parent, even a killed one)",
    )


def run(args: argparse.Namespace) -> int:
    if getattr(args, "sim_command", None) != "serve":
        print("gainbench sim: expected an action: serve (see gainbench sim serve --help)", file=sys.stderr)
        return 2
    from simulated_instruments.faults import parse_fault
    from simulated_instruments.instrument_servers import SimulatedBench
    from simulated_instruments.setup_config import SimulatorSetupError

    if not (math.isfinite(args.speed) and args.speed > 0):
        raise ConfigError(
            f"--speed {args.speed!r}: expected a positive number of simulated seconds per second"
        )
    cfg = load_bench(args.config, overrides=parse_overrides(args.overrides) or None)
    from bench.run.preflight import check_instruments

    check_instruments(cfg)  # the bench file's instrument mistakes, before the simulator trips on them
    if cfg.simulation is None:
        raise ConfigError(
            f"{cfg.source}: no [simulation] table; `gainbench sim serve` needs a simulated bench file"
        )
    try:
        faults = [parse_fault(spec) for spec in args.fault]
    except SimulatorSetupError as exc:
        raise ConfigError(str(exc)) from None
    stop = threading.Event()

    def on_signal(signum, frame) -> None:
        stop.set()

    wanted = [signal.SIGINT] + ([signal.SIGTERM] if hasattr(signal, "SIGTERM") else [])
    previous = {sig: signal.signal(sig, on_signal) for sig in wanted}
    if args.until_stdin_closes:
        # Started by a parent (`gainbench record`): a Ctrl-C at the terminal reaches both, and
        # the parent must switch the pump off before its instruments go away. This process
        # stops when the parent has finished (its standard input closes) or on SIGTERM.
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    from simulated_instruments.device_errors import DeviceError

    try:
        bench = SimulatedBench(cfg, speed=args.speed, faults=faults, seed=args.seed)
    except DeviceError as exc:  # a value the simulated instruments cannot take (e.g. their sample rates)
        raise ConfigError(
            f"{cfg.source}: the simulated bench cannot take this bench file: {exc.detail or exc}"
        ) from None
    except SimulatorSetupError as exc:
        raise ConfigError(str(exc)) from None
    try:
        with bench as sim:
            for role, resource in sim.resources.items():
                print(f"{role} {resource}")
            sys.stdout.flush()
            print(
                f"gainbench sim: serving {cfg.name} at speed {args.speed:g}; Ctrl-C to stop", file=sys.stderr
            )
            if args.until_stdin_closes:
                threading.Thread(target=_stop_at_eof, args=(stop,), daemon=True, name="stdin-watch").start()
            while not stop.wait(0.5):
                pass
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
    print("gainbench sim: stopped (simulated pump off)", file=sys.stderr)
    return 0


def _stop_at_eof(stop: threading.Event) -> None:
    """Set ``stop`` once standard input reaches its end (the parent closed it or died)."""
    try:
        while sys.stdin.buffer.read(4096):
            pass
    except (OSError, ValueError):
        pass
    stop.set()
