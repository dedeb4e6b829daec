"""`gainbench export RUN`: blocks, estimates or events as CSV or parquet, for pandas and others."""

from __future__ import annotations

import argparse
from pathlib import Path

from bench.store import resolve_run

NAME = "export"
HELP = "export a run's blocks, estimates or events as CSV or parquet"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", help="run id (or a unique prefix of one) or run file path")
    parser.add_argument("--logs", metavar="DIR", default="logs", help="run store directory (default logs)")
    parser.add_argument("--format", choices=("csv", "parquet"), default="csv", dest="fmt")
    parser.add_argument("--what", choices=("blocks", "estimates", "events"), default="estimates")
    parser.add_argument("--source", help="blocks of this instrument only (detector, pump, ...)")
    parser.add_argument("--analysis", type=int, help="estimates of this analysis id (default: all)")
    parser.add_argument("--out", metavar="PATH", help="output file (default: RUN-WHAT.FORMAT beside the run)")
    parser.add_argument("--force", action="store_true", help="overwrite an existing output file")


def run(args: argparse.Namespace) -> int:
    from bench.store.export import export_run

    path = resolve_run(args.run, args.logs)
    out = Path(args.out) if args.out else path.with_name(f"{path.stem}-{args.what}.{args.fmt}")
    written = export_run(
        path, args.fmt, args.what, out, source=args.source, analysis_id=args.analysis, overwrite=args.force
    )
    print(written)
    return 0
