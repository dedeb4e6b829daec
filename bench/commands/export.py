"""`gainbench export RUN`: blocks, estimates or events as CSV or parquet, for pandas and others;
``--what spectrum``: a spectrum run's cross-sections as a spectrum file a bench file can read."""

from __future__ import annotations

import argparse
from pathlib import Path

from bench.errors import ConfigError
from bench.store import resolve_run

NAME = "export"
HELP = "export a run's blocks, estimates or events as CSV or parquet"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", help="run id (or a unique prefix of one) or run file path")
    parser.add_argument("--logs", metavar="DIR", default="logs", help="run store directory (default logs)")
    parser.add_argument("--format", choices=("csv", "parquet"), default="csv", dest="fmt")
    parser.add_argument(
        "--what",
        choices=("blocks", "estimates", "events", "spectrum"),
        default="estimates",
        help="spectrum: a spectrum run's cross-sections as the CSV that sample.spectrum reads (always CSV)",
    )
    parser.add_argument("--source", help="blocks of this instrument only (detector, pump, ...)")
    parser.add_argument("--analysis", type=int, help="estimates of this analysis id (default: all)")
    parser.add_argument("--out", metavar="PATH", help="output file (default: RUN-WHAT.FORMAT beside the run)")
    parser.add_argument("--force", action="store_true", help="overwrite an existing output file")


def run(args: argparse.Namespace) -> int:
    from bench.store.export import export_run

    path = resolve_run(args.run, args.logs)
    if args.what == "spectrum":
        from bench.store.spectrum_export import export_spectrum

        if args.fmt != "csv":
            raise ConfigError("--format: a spectrum is written as a spectrum file (CSV), not parquet")
        out = Path(args.out) if args.out else path.with_name(f"{path.stem}-spectrum.csv")
        print(export_spectrum(path, out, overwrite=args.force))
        return 0
    out = Path(args.out) if args.out else path.with_name(f"{path.stem}-{args.what}.{args.fmt}")
    written = export_run(
        path, args.fmt, args.what, out, source=args.source, analysis_id=args.analysis, overwrite=args.force
    )
    print(written)
    return 0
