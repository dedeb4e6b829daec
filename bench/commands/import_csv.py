"""`gainbench import FILE --columns ...`: make a run from a CSV recorded elsewhere."""

from __future__ import annotations

import argparse

from bench.config import load_bench
from bench.errors import ConfigError

NAME = "import"
HELP = "make a run from a CSV recorded elsewhere (an oscilloscope or another logger)"

NEEDED = ("time", "probe", "reference", "pump_on")


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", help="CSV file with a header row")
    parser.add_argument("--columns", required=True, metavar="time=COL,probe=COL,reference=COL,pump_on=COL",
                        help="which CSV column holds each signal (time in s, probe and reference in V, "
                             "pump_on 0/1)")
    parser.add_argument("--config", metavar="FILE", help="bench file describing the sample (default: built-in)")
    parser.add_argument("--logs", metavar="DIR", help="run store directory (default: the bench file's run.log_dir)")
    parser.add_argument("--mode", choices=("watch", "chopped", "decay", "sweep"), help="analysis mode of the run")


def parse_columns(text: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for part in text.split(","):
        key, sep, col = part.partition("=")
        key, col = key.strip(), col.strip()
        if not sep or not key or not col:
            raise ConfigError(f"--columns: {part!r} is not NAME=COLUMN")
        if key not in NEEDED:
            raise ConfigError(f"--columns: unknown signal {key!r}; expected {', '.join(NEEDED)}")
        out[key] = col
    missing = [k for k in NEEDED if k not in out]
    if missing:
        raise ConfigError(f"--columns: missing {', '.join(missing)} (expected {'=COL,'.join(NEEDED)}=COL)")
    return out


def run(args: argparse.Namespace) -> int:
    from bench.csv_import import import_csv

    cfg = load_bench(args.config)
    path = import_csv(args.file, parse_columns(args.columns), cfg, args.logs, mode=args.mode)
    print(path.stem)
    return 0
