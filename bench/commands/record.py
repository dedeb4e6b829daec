"""`gainbench record`: acquire, estimate and log one run, headless.

The measurement goes: dark (probe shutter closed), baseline (pump off), the arming checklist,
then the pump on in the chosen mode for ``--seconds``, then the pump off and the run closed.
A one-line status is printed every second. The run id is printed at the end.
"""

from __future__ import annotations

import argparse
import math
import shutil
import sys
import time

from bench.errors import ConfigError, GainbenchError
from bench.estimator.mode import MODES, mode_of
from bench.run import stop_signals
from bench.run.preflight import add_run_options, load_for_run
from bench.units import parse_quantity

NAME = "record"
HELP = "acquire, estimate and log a run (headless; dark, baseline, arming checklist, pump program)"

#: Shots of a pulsed run when ``--shots`` is not given, and the most accepted.
DEFAULT_SHOTS = 50
MAX_SHOTS = 100_000

#: Exit statuses of `gainbench record` besides 0 (done) and 2 (bad input).
ARMING_REFUSED = 3
TRIP_NOT_ACKNOWLEDGED = 4

EXIT_STATUSES = f"""exit status:
  0    the pump program ran (a trip on the way was acknowledged: it is in the run's events)
  2    bad input (bench file, flags), or a procedure failed; nothing was switched on
  {ARMING_REFUSED}    arming refused by the checklist; the run holds dark and baseline only
  {TRIP_NOT_ACKNOWLEDGED}    the guard tripped and the trip could not be acknowledged (its condition still
       held 10 s later); the pump output was commanded off and the guard is left tripped
  130  interrupted (Ctrl-C); 143 terminated (SIGTERM); 129 terminal closed (SIGHUP);
       the pump output is commanded off and the run closed in every case"""


def configure(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EXIT_STATUSES
    parser.add_argument("--config", metavar="FILE", help="bench file; default: the built-in simulated bench")
    parser.add_argument(
        "--mode",
        choices=MODES,
        default=None,
        help="; ".join(m.cli_words for m in MODES.values())
        + " (default lockin on a bench with a lock-in amplifier, watch otherwise)",
    )
    parser.add_argument(
        "--seconds",
        type=float,
        default=5.0,
        metavar="N",
        help="how long the pump program runs, in seconds of the run clock (default 5)",
    )
    parser.add_argument("--current", metavar="I", help='pump current, e.g. "6 A" (default 80%% of the limit)')
    parser.add_argument("--steps", type=int, default=6, help="pump current steps in sweep mode (default 6)")
    parser.add_argument(
        "--period",
        metavar="T",
        help="pump modulation period in chopped, decay and sweep modes (a sweep chops every step), "
        'e.g. "50 ms" (default: from the settle windows at the pump current, for a sweep at '
        "its lowest step; a period that leaves no settled data is refused)",
    )
    parser.add_argument(
        "--frequencies",
        metavar="F1,F2,...",
        help="lockin mode: pump modulation frequencies, e.g. 20Hz,50Hz,100Hz,200Hz,500Hz; three or more "
        "give the lifetime from the response against frequency (default: one frequency, a tenth of "
        "the medium's corner 1/(2 pi tau)); --seconds is then the data time at each frequency, "
        "after the lock-in's settle time",
    )
    parser.add_argument(
        "--shots",
        metavar="N",
        help=f"pulsed mode: pump pulses to record once the pump emits (default {DEFAULT_SHOTS}; "
        "each is one triggered acquisition of the scope; the run ends when N shots are analysed, "
        "and --seconds is then only the longest it may take beyond their pulse period)",
    )
    parser.add_argument(
        "--wavelengths",
        metavar="START:STOP:STEP",
        help="spectrum mode: probe wavelengths, e.g. 1010nm:1050nm:2nm or 1020nm,1030nm,1040nm "
        "(default: the bench wavelength -/+ 20 nm in 4 nm steps); the run also measures at the bench "
        "wavelength first and last; --seconds is then the time at each wavelength",
    )
    parser.add_argument(
        "--logs", metavar="DIR", help="run store directory (default: the bench file's run.log_dir)"
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
        help="simulated bench only: inject a fault, e.g. interlock@3s (repeatable; "
        "see `gainbench sim serve --help`)",
    )
    parser.add_argument(
        "--operator", metavar="NAME", help="who runs the measurement (recorded with every answer)"
    )
    parser.add_argument(
        "--eyewear-od",
        action="append",
        default=[],
        metavar="WAVELENGTH=OD",
        help="OD of the eyewear worn, per laser wavelength, e.g. 940nm=5 (repeatable)",
    )
    parser.add_argument(
        "--confirm-setup",
        action="store_true",
        help="confirm that the beam path is enclosed, beam dumps are in place and the "
        "warning sign or light is on (otherwise asked on the terminal)",
    )
    parser.add_argument(
        "--set",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        dest="overrides",
        help="change a bench-file value for this run, e.g. guard.stale_after=1s (repeatable; "
        "the run stores the bench file as used)",
    )
    add_run_options(parser)  # --accept-lower-od
    parser.add_argument("--no-dark", action="store_true", help="skip the dark capture")
    parser.add_argument(
        "--no-background",
        action="store_true",
        help="watch and chopped modes: skip the background capture (probe shutter closed, pump on, once the pump "
        "is on: the sample's fluorescence and scattered pump on the probe detector above its dark, "
        "subtracted after; skipped with --no-dark too)",
    )
    parser.add_argument("--seed", type=int, help="simulated bench only: random seed")
    parser.add_argument("--quiet", action="store_true", help="no status line")


def run(args: argparse.Namespace) -> int:
    with stop_signals.shielded():  # a Ctrl-C acts once the imports are done (see bench.run.stop_signals)
        import bench.run.simulator_process  # noqa: F401
        import bench.safety.checklist  # noqa: F401 - imported here, not halfway through the run
        import bench.safety.conditions  # noqa: F401
        import bench.safety.guarded_pump  # noqa: F401
        import bench.store  # noqa: F401
        import drivers.registry  # noqa: F401
        from bench.run.measurement import Measurement
        from bench.run.pump_program import default_current, sweep_currents

    cfg = load_for_run(args)  # instruments checked, overrides lowering the eyewear OD refused
    if args.mode is None:
        from bench.run.lockin_setup import bench_default_mode

        args.mode = bench_default_mode(cfg)
    if args.seconds <= 0 or not math.isfinite(args.seconds):
        raise ConfigError(f"--seconds: {args.seconds} is not a positive number of seconds")
    if not (args.speed > 0 and math.isfinite(args.speed)):
        raise ConfigError(f"--speed: {args.speed} is not a positive number")
    if not cfg.simulated and (args.fault or args.speed != 1.0 or args.seed is not None):
        raise ConfigError("--fault, --speed and --seed apply to the simulated bench only")
    current = (
        default_current(cfg) if args.current is None else parse_quantity(args.current, "current", "--current")
    )
    if not (math.isfinite(current) and current >= 0):
        raise ConfigError(f"--current: {args.current!r} is not a pump current of 0 A or more")
    if current > min(cfg.guard.max_current, cfg.pump.max_current):
        raise ConfigError(
            f"--current: {current:g} A is above the guard's limit "
            f"({min(cfg.guard.max_current, cfg.pump.max_current):g} A)"
        )
    settings = {"pump_current": current, "pump_power": cfg.pump.power_at(current)}
    mode = mode_of(args.mode)
    currents = sweep_currents(cfg, args.steps) if mode.steps_pump else [current]
    period = _mode_period(args, cfg, currents[0])
    frequencies = _lockin_frequencies(args, cfg)
    shots = _shots(args)
    wavelengths = _spectrum_wavelengths(args, cfg)
    if wavelengths:
        settings["probe_wavelength"] = cfg.probe.wavelength
    if mode.steps_pump:
        settings = dict(mode.run_settings)  # a sweep: each step chopped (`Mode.run_settings`)
    answers, operator = _flag_answers(args, cfg)
    out = sys.stdout
    meas = Measurement(
        cfg,
        mode=args.mode,
        settings=settings,
        log_dir=args.logs,
        speed=args.speed,
        faults=tuple(args.fault),
        operator=operator or "",
        seed=args.seed,
        lockin_frequencies=frequencies,
        probe_wavelengths=wavelengths,
    )
    status = _Status(meas, quiet=args.quiet)
    with meas:
        print(
            f"gainbench: run {meas.run_id} on {cfg.name}{'  [SIMULATED]' if cfg.simulated else ''}", file=out
        )
        if wavelengths and abs(meas.probe_wavelength() - cfg.probe.wavelength) > 1e-6 * cfg.probe.wavelength:
            meas.set_wavelength(cfg.probe.wavelength)  # the scan starts at the bench wavelength
        if "shutter" in meas.instruments and not args.no_dark:
            print("capturing dark (probe shutter closed) ...", file=out)
            meas.capture_dark()
        print("capturing baseline (pump off) ...", file=out)
        meas.capture_baseline()
        result, operator = _arm(meas, cfg, answers, operator)
        if result is None or not result.passed:
            reasons = "; ".join(result.refusals) if result is not None else "no checklist answers"
            print(f"gainbench: arming refused: {reasons}", file=sys.stderr)
            print(f"run {meas.run_id} kept (dark and baseline only, pump never on)", file=out)
            return ARMING_REFUSED
        if period is not None:
            meas.set_modulation(1.0 / period)
        if frequencies:
            meas.set_modulation(frequencies[0])
        meas.set_current(currents[0], who=operator)
        meas.emit(who=operator)
        if _takes_background(mode, meas) and not (args.no_background or args.no_dark):
            print("capturing background (pump on, probe shutter closed) ...", file=out)
            print(f"  {meas.capture_background(who=operator)}", file=out)
        if frequencies:
            _frequency_program(meas, frequencies, args.seconds, status)
        elif shots is not None:
            _shot_program(meas, cfg, shots, args.seconds, status)
        elif wavelengths:
            _wavelength_program(meas, cfg, wavelengths, args.seconds, status, operator)
        else:
            per_step = args.seconds / len(currents)
            for k, i in enumerate(currents):
                if k:
                    meas.set_current(i, who=operator)
                meas.hold(
                    per_step, should_stop=lambda: meas.guarded_pump.state == "tripped", on_tick=status.line
                )
                if meas.guarded_pump.state == "tripped":
                    break
        tripped = meas.guarded_pump.state == "tripped"
        acknowledged = True
        if tripped and shots is not None:
            meas.stop_pulses(who=operator)  # the guard switched the output off; no pulses either
        if tripped:
            snap = meas.snapshot(with_history=False)
            print(f"\nguard TRIPPED: {snap.trip_reason}", file=out)
            lat = meas.guarded_pump.trip_latencies
            if lat:
                print(f"trip latency {lat[-1] * 1e3:.1f} ms (reading to pump-off command)", file=out)
            meas.hold(0.2)
            acknowledged = _acknowledge(meas, operator)
        else:
            meas.stop_emission(who=operator)
            if period is not None or frequencies:
                meas.set_modulation(None)
            if shots is not None:
                meas.stop_pulses(who=operator)
        meas.hold(0.05)
        status.line(final=True)
    print(f"\n{meas.run_id}", file=out)
    if tripped and not acknowledged:
        print(
            f"gainbench: the guard tripped and the trip is not acknowledged (exit status "
            f"{TRIP_NOT_ACKNOWLEDGED}); run {meas.run_id}",
            file=sys.stderr,
        )
        return TRIP_NOT_ACKNOWLEDGED
    return 0


#: The modes whose pump-on samples the background is subtracted from correctly: a steady pump,
#: or one chopped slowly against the medium (its settled pump-on samples see the steady level).
BACKGROUND_MODES = ("watch", "chopped")


def _takes_background(mode, meas) -> bool:
    """A mode of `BACKGROUND_MODES` on a bench with a probe shutter: the pump-induced
    background is measured once the pump is on."""
    return (
        mode.name in BACKGROUND_MODES
        and not mode.steps_pump
        and mode.pump_on is None
        and "shutter" in meas.instruments
        and meas.guarded_pump.state == "emitting"
    )


def _mode_period(args, cfg, current: float) -> float | None:
    """The modulation period of a chopped, decay or sweep run, checked before anything opens.

    A sweep chops the pump at every step (each step's ln R is then referred to the pump-off
    half-periods around it, not to the baseline taken before the sweep, so slow drift of the
    probe/reference ratio cancels); its period follows the settle windows at ``current``, the
    sweep's lowest step (the slowest rise).
    """
    from bench.estimator.timing import run_period

    if mode_of(args.mode).timing is None:
        if args.period is not None:
            modulated = [name for name, m in MODES.items() if m.timing is not None]
            raise ConfigError(
                f"--period: applies to {', '.join(modulated[:-1])} and {modulated[-1]} modes, not {args.mode}"
            )
        return None
    chosen = None if args.period is None else parse_quantity(args.period, "time", "--period")
    if chosen is not None and not (math.isfinite(chosen) and chosen > 0):
        raise ConfigError(f"--period: {args.period!r} is not a positive time")
    return run_period(cfg, args.mode, current, chosen)  # a sweep: the chopped rule (its Mode.timing)


def _lockin_frequencies(args, cfg) -> tuple[float, ...]:
    """The modulation frequencies of a lockin run (empty for another mode), checked first."""
    from bench.estimator.params import EstimatorParams
    from bench.records import LOCKIN_X
    from bench.run.lockin_setup import parse_frequencies

    if LOCKIN_X not in mode_of(args.mode).channels:
        if args.frequencies is not None:
            raise ConfigError(f"--frequencies: applies to lockin mode, not {args.mode}")
        return ()
    return parse_frequencies(args.frequencies, EstimatorParams.from_config(cfg))


def _shots(args) -> int | None:
    """The shots of a pulsed run (None for another mode), checked before anything opens."""
    from bench.records import TRIGGER_TIME

    if TRIGGER_TIME not in mode_of(args.mode).channels:
        if args.shots is not None:
            takers = [name for name, m in MODES.items() if TRIGGER_TIME in m.channels]
            raise ConfigError(f"--shots: applies to {' and '.join(takers)} mode, not {args.mode}")
        return None
    if args.shots is None:
        return DEFAULT_SHOTS
    text = str(args.shots).strip()
    try:
        n = int(text)
    except ValueError:
        raise ConfigError(
            f"--shots: {args.shots!r} is not a whole number of pump pulses (expected 2 ... {MAX_SHOTS}, e.g. 50)"
        ) from None
    if not 2 <= n <= MAX_SHOTS:
        raise ConfigError(
            f"--shots: {n} is outside 2 ... {MAX_SHOTS} (the shot-to-shot scatter needs two shots at least)"
        )
    return n


def _shot_program(meas, cfg, shots: int, seconds: float, status) -> None:
    """Emit until the estimator has analysed ``shots`` pumped shots (a pulsed run), or the
    guard trips; MeasurementError if they do not come within ``seconds`` plus 20 pulse periods
    per shot (a scope that never triggers, a pump that does not pulse)."""
    from bench.run.errors import MeasurementError

    limit = seconds + 20.0 * shots * float(cfg.pump.pulse_period)
    end = meas.clock.now() + limit

    def done() -> bool:
        if meas.guarded_pump.state == "tripped":
            return True
        est = meas.snapshot(with_history=False).estimate
        return est is not None and int(est.extra.get("shots", 0)) >= shots

    while not done():
        if meas.clock.now() > end:
            raise MeasurementError(
                f"--shots {shots}: fewer analysed within {limit:.3g} s of the run clock; is the scope "
                "triggered by the pump's pulses? (gainbench summary lists the run's gap events)"
            )
        meas.hold(0.05, should_stop=done, on_tick=status.line)


def _spectrum_wavelengths(args, cfg) -> tuple[float, ...]:
    """The probe wavelengths of a spectrum run (empty for another mode), syntax checked first."""
    from bench.run.wavelength_program import parse_wavelengths

    if not mode_of(args.mode).steps_wavelength:
        if args.wavelengths is not None:
            takers = [name for name, m in MODES.items() if m.steps_wavelength]
            raise ConfigError(f"--wavelengths: applies to {' and '.join(takers)} mode, not {args.mode}")
        return ()
    if "wavelength" not in cfg.instruments:
        raise ConfigError(
            f"--mode {args.mode}: {cfg.source} has no tunable probe ([instruments.wavelength], e.g. "
            'driver = "wavelength-source", profile = "generic-wavelength")'
        )
    return parse_wavelengths(args.wavelengths, cfg.probe.wavelength)


def _wavelength_program(meas, cfg, wavelengths, seconds: float, status, operator: str) -> None:
    """The bench wavelength, each wavelength in turn, the bench wavelength again: at each the
    step settle time, then ``seconds`` of chopped data (the pump is already emitting)."""
    from bench.run.wavelength_program import visiting_order

    order = visiting_order(wavelengths, cfg.probe.wavelength)
    per_step = meas.params.step_settle_time + seconds
    for k, lam in enumerate(order):
        if k:
            meas.set_wavelength(lam, who=operator)
        meas.hold(per_step, should_stop=lambda: meas.guarded_pump.state == "tripped", on_tick=status.line)
        if meas.guarded_pump.state == "tripped":
            break


def _frequency_program(meas, frequencies, seconds: float, status) -> None:
    """Each frequency in turn: the lock-in's settle time, then ``seconds`` of data (a lockin
    run; the pump is already emitting at the first frequency)."""
    settle = mode_of(meas.mode).settle(meas.params, meas.settings)[0]
    per_step = settle + seconds
    for k, f in enumerate(frequencies):
        if k:
            meas.set_modulation(f)
        if len(frequencies) > 1:
            print(
                f"modulation {f:g} Hz ({k + 1} of {len(frequencies)}): settle {settle:.2g} s, "
                f"then {seconds:g} s of data",
                file=sys.stdout,
            )
        meas.hold(per_step, should_stop=lambda: meas.guarded_pump.state == "tripped", on_tick=status.line)
        if meas.guarded_pump.state == "tripped":
            break


def _flag_answers(args, cfg):
    """Checklist answers from flags, or None to ask on the terminal."""
    from bench.safety.checklist_answers import answers_from_flags, parse_eyewear_flags

    operator = args.operator or cfg.run.operator or ""
    if args.eyewear_od or args.confirm_setup:
        ods = parse_eyewear_flags(args.eyewear_od)
        if not operator:
            raise ConfigError("--operator NAME is needed with --eyewear-od / --confirm-setup")
        return answers_from_flags(operator, ods, args.confirm_setup), operator
    return None, operator


def _arm(meas, cfg, answers, operator):
    """Judge the checklist; returns (result or None, the operator of the run).

    On a terminal without flags the operator's name is asked first; that person is then the
    operator of the run (stored with it) and the one named for switching the pump on.
    """
    from bench.safety.checklist_answers import run_interactive

    if answers is None:
        if not sys.stdin.isatty():
            print(
                "gainbench: the arming checklist needs answers: run on a terminal, or give --operator NAME, "
                "--eyewear-od WAVELENGTH=OD for each laser wavelength and --confirm-setup",
                file=sys.stderr,
            )
            return None, operator
        while not operator:
            try:
                operator = input("operator name: ").strip()
            except EOFError:
                return None, operator
        meas.set_operator(operator)
        answers = run_interactive(
            meas.checklist_items(), operator=operator, readings=meas.pump_readings(), clock=meas.clock.now
        )
    return meas.arm(answers, operator), operator


def _acknowledge(meas, operator: str) -> bool:
    """Acknowledge the trip once its condition has cleared (headless: wait up to 10 s)."""
    deadline = time.monotonic() + 10.0
    last = "no attempt"
    while time.monotonic() < deadline:
        try:
            meas.acknowledge(operator or "gainbench")
            print("trip acknowledged; guard back to safe", file=sys.stdout)
            return True
        except GainbenchError as exc:
            last = str(exc)
            time.sleep(0.2)
    print(f"trip not acknowledged: {last}", file=sys.stdout)
    return False


class _Status:
    """The one-line live status (elapsed, rate, drops, beta +- sigma), at most once a second."""

    def __init__(self, meas, quiet: bool):
        self.meas = meas
        self.quiet = quiet
        self.start = time.monotonic()
        self.last_samples = 0
        self.last_time = self.start

    def line(self, final: bool = False) -> None:
        snap = self.meas.snapshot(with_history=False)
        now = time.monotonic()
        rate = (snap.samples - self.last_samples) / max(now - self.last_time, 1e-9)
        self.last_samples, self.last_time = snap.samples, now
        est = snap.estimate
        beta = est.values.get("beta") if est is not None else None
        b = "beta -" if beta is None else f"beta {beta.value:.4f} ± {beta.sigma:.4f}"
        gain = est.values.get("gain_db") if est is not None else None
        g = "" if gain is None else f" | gain {gain.value:+.3f} ± {gain.sigma:.3f} dB"
        tau = est.values.get("tau_s") if est is not None else None
        tt = "" if tau is None else f" | tau {tau.value * 1e3:.4g} ± {tau.sigma * 1e3:.2g} ms"
        flags = f" | flags {','.join(sorted(est.flags))}" if est is not None and est.flags else ""
        text = (
            f"t {snap.t:7.2f} s | {_rate_text(rate)} | drops {snap.drops} | "
            f"guard {snap.guard_state} | {b}{g}{tt}{flags}"
        )
        if self.quiet and not final:
            return
        end = "\n" if final or not sys.stdout.isatty() else "\r"
        if end == "\r":
            # a line that wraps cannot be overwritten with a carriage return: keep it to one row
            width = shutil.get_terminal_size().columns
            text = text[: max(20, width - 1)].ljust(max(20, width - 1))
        print(text, end=end, file=sys.stdout, flush=True)


def _rate_text(rate: float) -> str:
    """Samples per second as read at a glance: ``"  99.9 k samples/s"`` for a digitiser,
    ``"  20.0 samples/s"`` for a polled meter."""
    if rate >= 1e3:
        return f"{rate / 1e3:7.1f} k samples/s"
    return f"{rate:7.1f} samples/s"
