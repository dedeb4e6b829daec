"""`gainbench report RUN`: PNG figures and one HTML page with a run's settings, estimates, safety record."""

from __future__ import annotations

import argparse

NAME = "report"
HELP = "write a run's figures (PNG) and an HTML report page (estimates, figures, checklist, trips, events)"


def _analysis(text: str):
    from bench.report.data import parse_analysis

    try:
        return parse_analysis(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an analysis id, 'live' or 'all', got {text!r}") from None


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", help="run id (or a unique prefix of one) or run file path")
    parser.add_argument("--logs", metavar="DIR", default="logs", help="run store directory (default logs)")
    parser.add_argument(
        "--out", metavar="DIR", help="output directory (default: RUN_ID-report beside the run file)"
    )
    parser.add_argument(
        "--analysis",
        metavar="N",
        type=_analysis,
        default="live",
        help="analysis id, 'live' (default: the estimates computed while recording) or 'all' "
        "(every analysis side by side)",
    )
    parser.add_argument(
        "--buckets",
        type=int,
        default=800,
        metavar="N",
        help="time buckets of the decimated signal figure (default 800)",
    )


def run(args: argparse.Namespace) -> int:
    from bench.report.build import build_report

    if args.buckets < 10:
        from bench.errors import GainbenchError

        raise GainbenchError(f"--buckets {args.buckets}: expected a whole number of at least 10")
    result = build_report(args.run, args.out, analysis=args.analysis, log_dir=args.logs, buckets=args.buckets)
    print(result.html)
    return 0
