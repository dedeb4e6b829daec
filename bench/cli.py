"""The `gainbench` command line: one sub-command per module of `bench.commands`."""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
import threading
from collections.abc import Sequence

from bench import __version__
from bench.errors import GainbenchError, Terminated

#: Modules of `bench.commands`, in the order `gainbench --help` lists them.
COMMAND_MODULES = (
    "sample",
    "check",
    "safety",
    "instruments",
    "sim",
    "record",
    "live",
    "runs",
    "summary",
    "replay",
    "export",
    "import_csv",
    "report",
    "benchmark",
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="gainbench",
        description="Pump-probe gain and inversion measurements: instruments, live estimates, "
        "guard, run store, replay. Laser safety: this software is a second layer only; it never "
        "replaces hardware interlocks, your laser safety officer, ANSI Z136.1 / IEC 60825-1 or "
        "local rules.",
    )
    parser.add_argument("--version", action="version", version=f"gainbench {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        module = importlib.import_module(f"bench.commands.{name}")
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.configure(p)
        p.set_defaults(_run=module.run)
    return parser


def _terminate(signum, frame) -> None:
    raise Terminated(signal.Signals(signum).name)


def _end_cleanly_on_signals() -> list[tuple[int, object]]:
    """SIGTERM and SIGHUP end the command as Ctrl-C does (pump off, run closed), not at once."""
    previous = []
    if threading.current_thread() is not threading.main_thread():
        return previous
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None:
            previous.append((sig, signal.signal(sig, _terminate)))
    return previous


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    previous = _end_cleanly_on_signals()
    try:
        return int(args._run(args) or 0)
    except Terminated as exc:
        print(f"gainbench: terminated ({exc.signal_name})", file=sys.stderr)
        return 128 + int(getattr(signal, exc.signal_name))
    except GainbenchError as exc:
        print(f"gainbench: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("gainbench: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # e.g. `gainbench runs | head`: the reader left, not an error
        try:
            sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
        except OSError:
            pass
        return 0
    finally:
        for sig, handler in previous:
            signal.signal(sig, handler)
