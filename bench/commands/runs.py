"""`gainbench runs`: the runs in a log directory, one line each."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from bench.store import list_runs

NAME = "runs"
HELP = "list the recorded runs (id, start, duration, sample, mode, size, final beta)"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--logs", metavar="DIR", default="logs", help="run store directory (default logs)")
    parser.add_argument("--json", action="store_true", help="print the list as JSON")


def run(args: argparse.Namespace) -> int:
    rows = list_runs(Path(args.logs))
    if args.json:
        print(json.dumps(rows, indent=2, default=str))
        return 0
    if not rows:
        print(f"no runs in {args.logs}")
        return 0
    print(
        f"{'run id':<34} {'start (UTC)':<19} {'duration':>9} {'sample':<16} {'mode':<8} {'size':>9}  final beta"
    )
    for r in rows:
        if r.get("status") == "unreadable":
            print(f"{r['id']:<34} UNREADABLE: {r.get('error')}")
            continue
        start = (r.get("start") or "")[:19].replace("T", " ")
        dur = "-" if r.get("duration_s") is None else f"{r['duration_s']:.1f} s"
        size = _size(r.get("size_bytes"))
        beta = "-" if r.get("beta") is None else f"{r['beta']:.4f} ± {r['beta_sigma']:.4f}"
        state = "" if r.get("status") == "complete" else f"  ({r.get('status')})"
        sim = " [sim]" if r.get("simulated") else ""
        print(
            f"{r['id']:<34} {start:<19} {dur:>9} {str(r.get('sample') or '-')[:16]:<16} "
            f"{str(r.get('mode') or '-'):<8} {size:>9}  {beta}{sim}{state}"
        )
    return 0


def _size(n) -> str:
    if n is None:
        return "-"
    for unit in ("B", "kB", "MB", "GB"):
        if n < 1000 or unit == "GB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000
    return str(n)
