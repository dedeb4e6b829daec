"""`gainbench replay RUN --headless`: stored raw blocks through the same pipeline again."""

from __future__ import annotations

import argparse
import json
import math
import sys

from bench.config import parse_overrides
from bench.errors import ConfigError
from bench.store import resolve_run

NAME = "replay"
HELP = "replay a run through the pipeline; --set KEY=VALUE re-analyses with corrected parameters"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", help="run id (or a unique prefix of one) or run file path")
    parser.add_argument("--logs", metavar="DIR", default="logs", help="run store directory (default logs)")
    parser.add_argument("--headless", action="store_true", help="no dashboard: print the result")
    parser.add_argument(
        "--speed",
        default="max",
        metavar="X|max",
        help="replay speed as a multiple of real time, or max (default max)",
    )
    parser.add_argument(
        "--set",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        dest="overrides",
        help="re-analyse with a bench-file value changed, e.g. sample.length=5.1mm (repeatable); "
        "the result is stored beside the original estimates",
    )
    parser.add_argument("--store", action="store_true", help="store the estimates of a plain replay too")
    parser.add_argument("--json", action="store_true", help="print the result as JSON")


def parse_speed(text: str) -> float | None:
    if text == "max":
        return None
    try:
        value = float(text)
    except ValueError:
        raise ConfigError(f"--speed: {text!r} is neither a number nor max") from None
    if not (value > 0 and math.isfinite(value)):
        raise ConfigError(f"--speed: {text!r} must be a positive number or max")
    return value


def run(args: argparse.Namespace) -> int:
    from bench.run.replay import replay

    speed = parse_speed(args.speed)
    overrides = parse_overrides(args.overrides)
    for key in overrides:
        if not key.startswith("sample."):
            raise ConfigError(f"--set {key}: only sample keys (sample.*) can be re-analysed")
    path = resolve_run(args.run, args.logs)
    if not args.headless:
        from bench.dashboard.replay_app import run_replay_dashboard

        return run_replay_dashboard(path, speed=speed, overrides=overrides)
    bar = _Progress(enabled=not args.json)
    result = replay(path, overrides=overrides, speed=speed, store=True if args.store else None, progress=bar)
    bar.done()
    final = result.final
    if args.json:
        out = {
            "run_id": result.run_id,
            "analysis_id": result.analysis_id,
            "overrides": result.overrides,
            "blocks": result.blocks,
            "samples": result.samples,
            "seconds": result.seconds,
            "samples_per_second": result.samples_per_second,
            "estimates": {k: q.as_dict() for k, q in (final.values.items() if final else [])},
            "max_relative_difference": result.max_relative_difference,
            "compared": result.compared,
        }
        print(json.dumps(out, indent=2, default=lambda o: None))
        return 0
    print(
        f"replayed {result.run_id}: {result.blocks} blocks, {result.samples} samples in {result.seconds:.2f} s "
        f"({result.samples_per_second / 1e6:.1f} M samples/s)"
    )
    if result.overrides:
        print(
            "re-analysis with "
            + ", ".join(f"{k}={v}" for k, v in result.overrides.items())
            + f"; stored as analysis {result.analysis_id} beside the original"
        )
    elif result.max_relative_difference is not None:
        same = (
            "identical"
            if result.max_relative_difference == 0
            else f"max relative difference {result.max_relative_difference:.2g}"
        )
        print(f"compared with the stored estimates: {result.compared} values, {same}")
    if final is not None:
        for key in ("ln_ratio", "gain_db", "gain_coefficient_per_cm", "n2_per_m3", "beta", "tau_s"):
            q = final.values.get(key)
            if q is not None:
                print(f"  {key:<24} {q.value:>12.6g} ± {q.sigma:.3g}")
    return 0


class _Progress:
    """A progress bar on stderr for long replays (on a terminal), else silent."""

    def __init__(self, enabled: bool):
        self.enabled = enabled and sys.stderr.isatty()
        self.shown = False

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled or total < 200:
            return
        width = 40
        k = int(width * done / max(total, 1))
        print(f"\r[{'#' * k}{'.' * (width - k)}] {done}/{total} blocks", end="", file=sys.stderr, flush=True)
        self.shown = True

    def done(self) -> None:
        if self.shown:
            print(file=sys.stderr)
