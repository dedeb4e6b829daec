"""`gainbench live`: the terminal dashboard on a bench, recording a run.

With no ``--config`` it opens the built-in simulated bench (served over loopback), and the
dashboard says so on its top line. The bench (instruments, guard, run file) runs in a process
of its own (`bench.run.measurement_process`). The pump output is off at start and off at exit, whatever
way the program ends: the measurement is closed in a ``finally``, and the bench process
switches the pump off by itself when the dashboard's process goes away.
"""

from __future__ import annotations

import argparse
import sys

from bench.errors import ConfigError, GainbenchError
from bench.estimator.mode import MODES
from bench.run.preflight import add_run_options, load_for_run

NAME = "live"
HELP = "the live dashboard: signals, guard, pump, estimates; dark, baseline, arming, emission (records a run)"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", metavar="FILE", help="bench file; default: the built-in simulated bench")
    parser.add_argument(
        "--logs", metavar="DIR", help="run store directory (default: the bench file's run.log_dir)"
    )
    parser.add_argument(
        "--mode",
        choices=tuple(MODES),
        default=None,
        help="mode to start in (changed on the dashboard with key m; default lockin on a bench with a "
        "lock-in amplifier, watch otherwise)",
    )
    parser.add_argument(
        "--speed",
        type=float,
        default=1.0,
        help="simulated bench only: simulated seconds per real second (default 1)",
    )
    parser.add_argument(
        "--fault",
        action="append",
        default=[],
        metavar="SPEC",
        help="simulated bench only: inject a fault, e.g. interlock@30s+5s (repeatable)",
    )
    parser.add_argument(
        "--operator", metavar="NAME", help="who is at the bench (asked in the checklist otherwise)"
    )
    parser.add_argument(
        "--current-step",
        type=float,
        default=0.25,
        metavar="A",
        help="pump current change per key press, A (default 0.25)",
    )
    parser.add_argument("--no-record", action="store_true", help="show the bench without recording a run")
    parser.add_argument("--seed", type=int, help="simulated bench only: random seed")
    parser.add_argument(
        "--set",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        dest="overrides",
        help="change a key of the bench file for this run, with units, e.g. "
        "guard.stale_after=1s (repeatable)",
    )
    add_run_options(parser)  # --accept-lower-od
    parser.add_argument(
        "--single-process",
        action="store_true",
        help="run the bench in the dashboard's own process (by default it has a process of "
        "its own, so that drawing the screen never slows acquisition)",
    )


def run(args: argparse.Namespace) -> int:
    from bench.dashboard.live_app import LiveDashboard
    from bench.run.measurement import Measurement
    from bench.run.measurement_process import RemoteMeasurement
    from bench.run.pump_program import default_current

    cfg = load_for_run(args)  # instruments checked, overrides lowering the eyewear OD refused
    if not 0 < args.speed < float("inf"):
        raise ConfigError(f"--speed: {args.speed} is not a positive number")
    if not cfg.simulated and (args.fault or args.speed != 1.0 or args.seed is not None):
        raise ConfigError("--fault, --speed and --seed apply to the simulated bench only")
    if not 0 < args.current_step < float("inf"):
        raise ConfigError(f"--current-step: {args.current_step} is not a positive current")
    if args.mode is None:
        from bench.run.lockin_setup import bench_default_mode

        args.mode = bench_default_mode(cfg)
    current = default_current(cfg)
    settings = (
        {} if args.mode == "sweep" else {"pump_current": current, "pump_power": cfg.pump.power_at(current)}
    )
    kind = Measurement if args.single_process else RemoteMeasurement
    meas = kind(
        cfg,
        mode=args.mode,
        settings=settings,
        log_dir=args.logs,
        speed=args.speed,
        faults=tuple(args.fault),
        operator=args.operator or "",
        record=not args.no_record,
        seed=args.seed,
    )
    app = LiveDashboard(meas, operator=args.operator or "", current_step=args.current_step)
    if not args.single_process:
        meas.start()  # before the screen takes over the terminal; the dashboard waits for it
    try:
        app.run()  # the dashboard opens the measurement once its screen is up
    finally:
        meas.close(reason="stopped" if app.return_code == 0 else "dashboard ended")
    if app.open_error:
        raise GainbenchError(f"could not open {cfg.name}: {app.open_error}")
    figures = app.latency.figures(meas.speed)
    if figures is not None:
        print(
            f"dashboard: {figures.repaint_hz:.1f} repaints/s; reading to screen median "
            f"{figures.median * 1e3:.0f} ms, 95th percentile {figures.p95 * 1e3:.0f} ms, worst "
            f"{figures.worst * 1e3:.0f} ms (last {figures.n} repaints)",
            file=sys.stderr,
        )
    if meas.run_id:
        print(f"run {meas.run_id} closed; the pump output is off")
        print(meas.run_id)
    return int(app.return_code or 0)
