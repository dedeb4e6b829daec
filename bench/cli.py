"""The `gainbench` command line: one sub-command per module of `bench.commands`."""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
from collections.abc import Sequence

from bench import __version__
from bench.errors import GainbenchError, Terminated
from bench.run import stop_signals

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


def main(argv: Sequence[str] | None = None) -> int:
    # Ctrl-C, SIGTERM and SIGHUP end the command cleanly (pump off, run closed); once one has,
    # further ones cannot interrupt the shutdown (bench.run.stop_signals).
    previous = stop_signals.install()
    try:
        with stop_signals.shielded():  # imports every command: a Ctrl-C then acts once they are done
            parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "_run", None):
            parser.print_help()
            return 2
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
        stop_signals.restore(previous)
