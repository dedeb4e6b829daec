"""`gainbench benchmark`: measure this machine against the figures gainbench needs."""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

NAME = "benchmark"
HELP = "measure disk, acquisition rate, estimator, replay, trip latency and memory on this machine"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--quick", action="store_true", help="shorter runs (about a minute)")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    parser.add_argument(
        "--logs",
        metavar="DIR",
        help="directory on the disk to measure (default: a temporary directory; runs made "
        "by the benchmark are deleted afterwards)",
    )


def run(args: argparse.Namespace) -> int:
    from bench.performance import run_benchmark

    def report(text: str) -> None:
        print(text, file=sys.stderr, flush=True)

    with tempfile.TemporaryDirectory(prefix="gainbench-benchmark-", dir=args.logs) as tmp:
        figures = run_benchmark(Path(tmp), quick=args.quick, report=report)
    if args.json:
        print(
            json.dumps(
                [
                    {
                        "name": f.name,
                        "value": f.value,
                        "unit": f.unit,
                        "reference": f.reference,
                        "detail": f.detail,
                        "extra": f.extra,
                    }
                    for f in figures
                ],
                indent=2,
                default=str,
            )
        )
        return 0
    width = max(len(f.name) for f in figures)
    for f in figures:
        value = "-" if f.value is None else f"{f.value:.4g}"
        detail = f" [{f.detail}]" if f.detail else ""
        print(f"{f.name:<{width}}  {value:>10} {f.unit:<24} {f.reference}{detail}")
    return 0
