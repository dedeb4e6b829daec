"""A live measurement: instruments, readers, the consumer thread, the guard, and the run.

`Measurement` puts the pieces together for `gainbench record` and the dashboard:

- it starts the simulated bench when the bench file says ``resource = "simulated"`` and opens
  every configured instrument through the driver registry (`bench.run.instrument_setup`);
- it creates the run file and a `GuardedPump` (which commands the pump off at once);
- it runs one reader thread per instrument and one consumer thread (`bench.run.consumer`);
- on the simulated bench, a thread polls the simulator's truth (`bench.run.truth_poller`);
- it offers the procedures a person runs at the bench: capture dark, capture baseline,
  arm through the checklist, emit, set the pump current, change mode;
- `close` commands the pump off first, then stops the threads, then closes the run. It runs on
  normal exit, on Ctrl-C and on an exception (use the object as a context manager).

Procedures block the calling thread (the command line's main thread, or a dashboard worker),
never the consumer.
"""

from __future__ import annotations

import contextlib
import gc
import logging
import queue
import sys
import threading
import time
from collections.abc import Callable, Mapping
from typing import Any

from bench.config import BenchConfig
from bench.errors import Terminated
from bench.estimator.params import EstimatorParams
from bench.records import Event
from bench.run import stop_signals
from bench.run.consumer import Consumer, Control, Snapshot
from bench.run.errors import MeasurementError
from bench.run.instrument_setup import (
    close_instruments,
    configured_resources,
    make_simulator,
    needs_simulator,
    open_instruments,
    simulated_resources,
    visa_libraries,
)
from bench.run.preflight import override_events
from bench.run.readers import (
    DetectorReader,
    DropCounter,
    MeterReader,
    PumpReader,
    Reader,
    RunClock,
    stop_readers,
)
from bench.run.truth_poller import poll_truth
from bench.safety import checklist
from bench.safety.guard_checks import GuardChecks
from bench.store import RunWriter

log = logging.getLogger(__name__)

#: Interpreter thread switch interval during a measurement (s); see `Measurement.open`.
SWITCH_INTERVAL = 0.0005

#: At close, s the consumer may go on analysing what is queued, then s it may take to store the
#: rest without analysing it.
CLOSE_ANALYSE_S = 10.0
CLOSE_STORE_S = 30.0

#: Run-clock s of data one detector block spans at least (the reader waits for that much):
#: fewer, larger blocks cost the interpreter less per sample; a detector-based trip waits at
#: most this long for its reading.
MIN_BLOCK = 0.01

#: Queue length in blocks; at 64k sample sets per block this is several seconds of data.
QUEUE_BLOCKS = 256


class Measurement:
    """One live session on a bench; see the module docstring."""

    def __init__(
        self,
        cfg: BenchConfig,
        *,
        mode: str = "watch",
        settings: Mapping[str, Any] | None = None,
        log_dir=None,
        speed: float = 1.0,
        faults: tuple[str, ...] = (),
        operator: str = "",
        record: bool = True,
        fetch_sets: int | None = None,
        pump_poll: float = 0.02,
        min_block: float = MIN_BLOCK,
        seed: int | None = None,
        sim_in_process: bool = False,
        lockin_frequencies: tuple[float, ...] = (),
        probe_wavelengths: tuple[float, ...] = (),
    ):
        self.cfg = cfg
        self.mode = mode
        self.settings = dict(settings or {})
        self.log_dir = log_dir if log_dir is not None else cfg.run.log_dir
        self.speed = float(speed) if cfg.simulated else 1.0
        self.faults = tuple(faults)
        self.operator = operator or cfg.run.operator
        self.record = record
        self.fetch_sets = fetch_sets
        self.pump_poll = pump_poll
        self.min_block = min_block
        self.seed = seed
        self.sim_in_process = sim_in_process
        #: A lock-in bench: the modulation frequencies the run will use (its output filter is
        #: set for the lowest, `bench.run.lockin_setup.configure_filter`).
        self.lockin_frequencies = tuple(float(f) for f in lockin_frequencies)
        self.probe_wavelengths = tuple(float(w) for w in probe_wavelengths)
        self.sim = None
        self.instruments: dict[str, Any] = {}
        self.identities: dict[str, str] = {}
        self.store = None
        self.checks = None  # the guard: monitor, guarded pump and checks (bench.safety.guard_checks)
        self.guarded_pump = None
        self.monitor = None
        self.consumer: Consumer | None = None
        self.clock = RunClock(self.speed)
        self.drops = DropCounter()
        self.data_q: queue.Queue = queue.Queue(maxsize=QUEUE_BLOCKS)
        self.pump_q: queue.Queue = queue.Queue(maxsize=QUEUE_BLOCKS)
        self.control_q: queue.SimpleQueue = queue.SimpleQueue()
        self.stop_flag = threading.Event()
        self._store_only = threading.Event()  # set at a late close: store, do not analyse
        self.readers: list[Reader] = []
        self._consumer_thread: threading.Thread | None = None
        self._truth_thread: threading.Thread | None = None
        self._consumer_error: BaseException | None = None
        self._closed = False
        self._started_wall = None

    # -- life cycle ---------------------------------------------------------------------------
    def __enter__(self) -> Measurement:
        try:
            self.open()
        except BaseException:
            self.close(reason="failed to start")
            raise
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is KeyboardInterrupt:
            reason = "interrupted (Ctrl-C)"
        elif exc_type is not None and issubclass(exc_type, Terminated):
            reason = f"terminated ({exc.signal_name})"
        elif exc_type is not None:
            reason = f"stopped by an error: {exc_type.__name__}: {exc}"
        else:
            reason = "stopped"
        self.close(reason=reason)

    def _check_mode(self, mode: str) -> None:
        """A polled detector (a meter) gives one reading at a time: only a mode that takes
        such a stream (`bench.estimator.mode.Mode.polled`) can run on it. A lock-in's readings
        are for the mode that reads its channels (lockin), and that mode needs a lock-in."""
        from bench.estimator.mode import MODES, mode_of
        from bench.records import LOCKIN_X

        driver = self.cfg.instruments["detector"].driver if "detector" in self.cfg.instruments else ""
        needs_lockin = LOCKIN_X in mode_of(mode).channels
        where = f"instruments.detector.driver = {driver!r}"
        if driver == "lockin" and not needs_lockin:
            fits = ", ".join(name for name, m in MODES.items() if LOCKIN_X in m.channels)
            raise MeasurementError(
                f"{mode} mode needs the probe's signal itself; the detector of this bench is a lock-in "
                f"amplifier ({where}), which works in {fits} mode"
            )
        if needs_lockin and driver != "lockin":
            raise MeasurementError(
                f"{mode} mode needs a lock-in amplifier as the detector; this bench has {where} "
                "(see bench/data/demo_lockin_bench.toml)"
            )
        from bench.run.scope_reader import TRIGGER_TIME

        needs_scope = TRIGGER_TIME in mode_of(mode).channels
        if driver == "scope" and not needs_scope:
            fits = ", ".join(name for name, m in MODES.items() if TRIGGER_TIME in m.channels)
            raise MeasurementError(
                f"{mode} mode needs a continuous record of the probe; the detector of this bench is a "
                f"triggered scope ({where}), which works in {fits} mode"
            )
        if needs_scope and driver != "scope":
            raise MeasurementError(
                f"{mode} mode needs a triggered scope as the detector; this bench has {where} "
                "(see bench/data/demo_pulsed_bench.toml)"
            )
        if needs_scope and (self.cfg.pump.pulse_width is None or self.cfg.pump.pulse_period is None):
            raise MeasurementError(
                f"{self.cfg.source}: pump.pulse_width and pump.pulse_period: {mode} mode pulses the pump, "
                'so the bench file must give both, e.g. pulse_width = "0.5 ms", pulse_period = "10 ms"'
            )
        if mode_of(mode).steps_wavelength and "wavelength" not in self.cfg.instruments:
            raise MeasurementError(
                f"{mode} mode tunes the probe: the bench file needs an instrument of role wavelength "
                '([instruments.wavelength], e.g. driver = "wavelength-source", profile = "generic-wavelength")'
            )
        if driver == "meter" and not mode_of(mode).polled:
            fits = ", ".join(name for name, m in MODES.items() if m.polled and LOCKIN_X not in m.channels)
            raise MeasurementError(
                f"{mode} mode needs a sampled detector (a digitiser); the detector of this bench "
                f"is a polled meter ({where}), which works in {fits} mode"
            )

    def open(self) -> None:
        cfg = self.cfg
        self._check_mode(self.mode)
        # Threads waiting on an instrument's reply get the interpreter back within 0.5 ms
        # instead of the default 5 ms: the guard's exchanges with the pump are several
        # hand-overs each, and trip latency is what this buys (a little throughput is the cost).
        sys.setswitchinterval(SWITCH_INTERVAL)
        resources = configured_resources(cfg)
        if needs_simulator(resources):
            self.sim = make_simulator(
                cfg, speed=self.speed, faults=self.faults, seed=self.seed, in_process=self.sim_in_process
            )
            self.sim.__enter__()
            resources = simulated_resources(resources, self.sim)
        # filled as they open: what opened before a failure is closed by `close`
        open_instruments(cfg, resources, self.instruments, self.identities, on_event=self.control_q.put)
        if self.probe_wavelengths:  # a scan the source cannot reach: refused before a run file exists
            from bench.run.wavelength_program import check_in_range

            check_in_range(self.probe_wavelengths, self.tuning_range(), None)
        pump = self.instruments["pump"]
        shutter = self.instruments.get("shutter")
        self.clock = RunClock(self.speed)  # the run's time zero: instruments open, nothing read yet
        if self.record:
            self.store = RunWriter.from_config(
                cfg,
                mode=self.mode,
                instruments=self.identities,
                log_dir=self.log_dir,
                meta={
                    "speed": self.speed,
                    "faults": list(self.faults),
                    "visa_library": visa_libraries(self.instruments),
                },
            )
            self.store.set_meta(
                estimator_mode=self.mode,
                estimator_settings=self.settings,
                bench_overrides=dict(cfg.overrides),
            )
            if self.operator:
                self.store.set_meta(operator=self.operator)
        # the guard: commands the pump output off at once
        self.checks = GuardChecks(
            cfg,
            pump,
            shutter,
            self.clock,
            speed=self.speed,
            event_sink=self.control_q.put,
            stop=self.stop_flag,
            mode=lambda: (self.mode, self.settings),
        )
        self.monitor, self.pump_access, self.guarded_pump = (
            self.checks.monitor,
            self.checks.pump_access,
            self.checks.guarded_pump,
        )
        detector = self.instruments["detector"]
        detector.configure()
        params = EstimatorParams.from_config(cfg)
        self.params = params
        if cfg.instruments["detector"].driver == "lockin":
            from bench.run.lockin_setup import configure_filter, default_frequency

            freqs = self.lockin_frequencies or (default_frequency(params),)
            self.settings.update(configure_filter(detector, freqs))
            # the guard starts safe: the pump is known off until it emits (the lock-in's
            # reference runs whenever the modulation does, so it cannot tell)
            self.settings.setdefault("emission_stop", 0.0)
            if self.store is not None:
                self.store.set_meta(estimator_settings=self.settings)
        if cfg.instruments["detector"].driver == "scope":
            self._start_pulse_train(pump)
        self.checks.use_params(params)
        # The guard's checks run in the reader threads (`GuardChecks.on_block`), not in the consumer.
        self.consumer = Consumer(
            params,
            self.mode,
            self.settings,
            store=self.store,
            guarded_pump=self.guarded_pump,
            now=self.clock.now,
            drop_totals=self.drops.totals,
        )
        self.consumer.extra["identities"] = dict(self.identities)
        det_reader = self._detector_reader(detector)
        # The pump's readings have a queue of their own, served first: a trip condition must not
        # wait behind a backlog of detector blocks.
        pump_reader = PumpReader(
            pump,
            self.pump_q,
            self.clock,
            self.drops,
            self.stop_flag,
            period=self.pump_poll,
            access=self.pump_access,
        )
        self.readers = [det_reader, pump_reader]
        for r in self.readers:
            r.on_block = self.checks.on_block
            r.on_comm = self.checks.on_comm
        self._consumer_thread = threading.Thread(target=self._consume, name="consumer", daemon=True)
        self._consumer_thread.start()
        self.monitor.started_at = self.clock.now()  # staleness counts from here
        det_reader.start_acquisition()
        self.control_q.put(
            Event(
                self.clock.now(),
                "run",
                f"run started on {cfg.name}",
                self.operator or "gainbench",
                data={"mode": self.mode, "speed": self.speed, "simulated": cfg.simulated},
            )
        )
        for event in override_events(
            cfg, self.clock.now(), self.operator or "gainbench"
        ):  # --accept-lower-od
            self.control_q.put(event)
        for r in self.readers:
            r.start()
        self.checks.start_threads()  # the stale-reading watchdog and the pump checks
        # What exists now (imports, drivers, the run file) lives as long as the run: out of the
        # collector's reach, a full collection scans only what the run makes, and no longer
        # holds the readers up for 100 ms or more.
        gc.freeze()
        if self.sim is not None:
            self._truth_thread = threading.Thread(
                target=poll_truth,
                name="truth",
                daemon=True,
                args=(self.cfg, self.sim, self.readers[0], self.stop_flag, self.control_q.put),
            )
            self._truth_thread.start()

    def _start_pulse_train(self, pump) -> None:
        """A scope bench: the pump driver's pulse train (the scope's trigger) set and switched
        on while the output is off, so that the scope records shots for the dark and the
        baseline too. Light leaves the diode only while the guard has the output on (the guard
        alone commands it); `close` switches pulsing off again after the output."""
        width, period = self.cfg.pump.pulse_width, self.cfg.pump.pulse_period
        with stop_signals.shielded():  # never a pump exchange cut in half (see GuardedPump._run)
            pump.set_pulsing(width, period)
        self._pulsing = True
        self.settings.update(pulse_width=float(width), pulse_period=float(period))
        if self.store is not None:
            self.store.set_meta(estimator_settings=self.settings)
        self.control_q.put(
            Event(
                self.clock.now(),
                "setting",
                f"pump pulses {width * 1e3:g} ms every {period * 1e3:g} ms (output off until emitting)",
                "gainbench",
                data={"pulse_width_s": width, "pulse_period_s": period},
            )
        )

    def stop_pulses(self, who: str = "gainbench") -> None:
        """Switch the pump driver's pulsing off (the output is the guard's: switch it off
        first, or let the guard trip). Nothing to do on a bench that does not pulse."""
        if not getattr(self, "_pulsing", False):
            return
        self._pulsing = False
        pump = self.instruments.get("pump")
        if pump is None:
            return
        for attempt in (1, 2):
            # a first refusal may be an error the driver queued before (the interlock's 201,
            # read with this command's error query): the queue is drained, so ask once more
            try:
                with stop_signals.shielded():
                    pump.pulse(False)
                break
            except Exception:  # the output is off already; closing must go on
                if attempt == 2:
                    log.exception("pump pulsing off")
                    return
        self.control_q.put(
            Event(self.clock.now(), "setting", "pump pulsing off", who, data={"pulsing": False})
        )

    def _detector_reader(self, detector) -> Reader:
        """The detector's reader, by its driver: a polled meter or lock-in, a triggered scope,
        else the digitiser's."""
        driver = self.cfg.instruments["detector"].driver
        if driver == "scope":
            from bench.run.scope_reader import ScopeReader

            return ScopeReader(detector, self.data_q, self.clock, self.drops, self.stop_flag)
        if driver == "meter":
            return MeterReader(detector, self.data_q, self.clock, self.drops, self.stop_flag)
        if driver == "lockin":
            from bench.run.lockin_reader import LockInReader

            return LockInReader(detector, self.data_q, self.clock, self.drops, self.stop_flag, seed=self.seed)
        rate = float(detector.rate_hz)
        # A fetch returns what is waiting, up to this: enough to catch up on a backlog at once.
        fetch = self.fetch_sets or int(min(65536, max(1024, rate * self.speed * 0.25)))
        return DetectorReader(
            detector,
            self.data_q,
            self.clock,
            self.drops,
            self.stop_flag,
            max_sets=fetch,
            min_block=self.min_block,
        )

    def close(self, reason: str = "stopped") -> None:
        """Pump off first, then stop the threads, then close the run file. Safe to call twice.

        Ctrl-C and termination signals arriving meanwhile are held until it has finished: they
        must not cut off the pump-off command, its read-back or the closing of the run file.
        """
        if self._closed:
            return
        self._closed = True
        with stop_signals.shielded("the pump is off and the run closed"):
            self._close(reason)

    def _close(self, reason: str) -> None:
        if self.guarded_pump is not None:
            try:
                self.guarded_pump.shutdown(reason=reason)
            except Exception:  # the guard logs loudly itself; closing must go on
                log.exception("pump shutdown")
        self.stop_pulses()  # after the output is off
        stop_readers(
            self.readers,
            self.stop_flag,
            timeout=5.0,
            on_stuck=lambda r: log.error("reader %s did not stop", r.name),
        )
        if self._truth_thread is not None:
            self._truth_thread.join(2.0)
        if self.checks is not None:
            self.checks.join(2.0)
        if self._consumer_thread is not None:
            # The consumer finishes what the readers queued before the run file closes. If it
            # is far behind (an accelerated bench producing estimates faster than they can be
            # made), it stores the rest of the raw blocks without analysing them: replay
            # analyses them later; nothing read is lost.
            self._consumer_thread.join(CLOSE_ANALYSE_S)
            if self._consumer_thread.is_alive():
                self._store_only.set()
                self._consumer_thread.join(CLOSE_STORE_S)
            if self._consumer_thread.is_alive():
                log.error(
                    "the consumer did not finish within %.0f s; the run file is closed without the "
                    "blocks still queued",
                    CLOSE_ANALYSE_S + CLOSE_STORE_S,
                )
        if self.store is not None:
            try:
                if self.consumer is not None:
                    self.consumer.drain_events(self.control_q)
                    if self.consumer.unanalysed_blocks:
                        self.consumer.record_event(
                            Event(
                                self.clock.now(),
                                "run",
                                f"{self.consumer.unanalysed_blocks} detector blocks stored at close without being "
                                "analysed (the analysis was behind); replay analyses them",
                                data={"unanalysed_blocks": self.consumer.unanalysed_blocks},
                            )
                        )
                    self.consumer.record_event(Event(self.clock.now(), "run", f"run {reason}"))
                self.store.close(reason=reason)
            except Exception:
                log.exception("closing the run file")
        close_instruments(self.instruments, self.sim)

    # -- threads --------------------------------------------------------------------------
    def _consume(self) -> None:
        c = self.consumer
        assert c is not None
        last_tick = 0.0
        try:
            while True:
                c.drain_controls(self.control_q)
                c.drain_controls(self.pump_q)
                try:
                    item = self.data_q.get(timeout=0.005)
                except queue.Empty:
                    item = None
                    if self.stop_flag.is_set():
                        break
                if item is not None:
                    if self._store_only.is_set():
                        c.store_only(item)
                    else:
                        c.process(item)
                now = time.monotonic()
                if now - last_tick >= 0.05:
                    last_tick = now
                    c.tick(self.clock.now())
            c.drain_controls(self.pump_q)
            c.drain_controls(self.control_q)
            c.finish()  # the stream has ended: a sweep's open step becomes its last point
        except BaseException as exc:  # the pump goes off on any failure of the pipeline
            self._consumer_error = exc
            log.exception("consumer failed; switching the pump off")
            if self.guarded_pump is not None:
                with contextlib.suppress(Exception):
                    self.guarded_pump.trip(
                        "the acquisition pipeline failed: " + repr(exc), "pipeline_failure", self.clock.now()
                    )
            self.stop_flag.set()

    # -- state for displays -------------------------------------------------------------------
    def snapshot(self, with_history: bool = True) -> Snapshot:
        assert self.consumer is not None
        return self.consumer.snapshot(with_history=with_history)

    @property
    def is_open(self) -> bool:
        """`open` has set up the pipeline (it stays so after `close`, for the last snapshot)."""
        return self.consumer is not None

    @property
    def run_id(self) -> str | None:
        return getattr(self.store, "run_id", None)

    @property
    def run_path(self):
        return getattr(self.store, "path", None)

    def check_alive(self) -> None:
        if self._consumer_error is not None:
            raise MeasurementError(f"the acquisition pipeline failed: {self._consumer_error!r}")

    # -- waiting on data time ---------------------------------------------------------------
    def data_time(self) -> float:
        assert self.consumer is not None
        return self.consumer.snapshot(with_history=False).t

    def wait_data_until(self, t: float, timeout: float | None = None) -> None:
        """Block until the consumer has processed detector data up to run-clock time ``t``."""
        limit = (
            timeout if timeout is not None else 5.0 + max(0.0, t - self.data_time()) / self.speed * 3 + 5.0
        )
        deadline = time.monotonic() + limit
        while self.data_time() < t:
            self.check_alive()
            if time.monotonic() > deadline:
                raise MeasurementError(f"no detector data up to t = {t:.3f} s after {limit:.1f} s of waiting")
            time.sleep(0.005)

    def hold(
        self,
        seconds: float,
        should_stop: Callable[[], bool] | None = None,
        on_tick: Callable[[], None] | None = None,
        tick: float = 1.0,
    ) -> None:
        """Let data flow for ``seconds`` of run-clock time."""
        end = self.clock.now() + seconds
        next_tick = time.monotonic() + tick
        while self.clock.now() < end:
            self.check_alive()
            if should_stop is not None and should_stop():
                return
            time.sleep(min(0.02, max(0.0, (end - self.clock.now()) / self.speed)))
            if on_tick is not None and time.monotonic() >= next_tick:
                next_tick += tick
                on_tick()

    # -- procedures -----------------------------------------------------------------------------
    @property
    def detector_settle(self) -> float:
        """Seconds the detector's own readings take to follow a change of light: a lock-in's
        output filter (`bench.estimator.modes.lockin`, which reads its levels through it), else 0."""
        if "lockin_time_constant" not in self.settings:
            return 0.0
        from bench.physics import rc_settle_time

        tc = float(self.settings["lockin_time_constant"])
        order = int(self.settings.get("lockin_filter_order") or 1)
        return float(rc_settle_time(tc, order, 1e-5))

    def capture_dark(self, seconds: float = 0.2, settle: float = 0.1, who: str = "gainbench") -> None:
        """Close the probe shutter, take ``seconds`` of dark, open it again."""
        shutter = self.instruments.get("shutter")
        if shutter is None:
            raise MeasurementError(
                "capture dark: no shutter is configured to block the probe; "
                "block it by hand and use a bench file with a shutter, or skip the dark"
            )
        if self.guarded_pump is not None and self.guarded_pump.state == "emitting":
            raise MeasurementError(
                "capture dark: the pump is on; the dark is taken with the pump off (with it on, the "
                "blocked probe detector also sees the sample's fluorescence and scattered pump: that "
                "is the background, captured apart). Switch the pump off first"
            )
        settle = max(settle, self.detector_settle)
        shutter.close_shutter("probe")
        try:
            t0 = self.clock.now() + settle
            t1 = t0 + seconds
            self.wait_data_until(t1 + 0.01)
            self._apply_and_wait(Control("dark", self.clock.now(), {"t_start": t0, "t_end": t1}, who))
        finally:
            shutter.open_shutter("probe")
            self.hold(settle)

    def capture_baseline(self, seconds: float = 0.3, who: str = "gainbench") -> None:
        """Pump off, wait for the medium to relax (settle time), take ``seconds`` of baseline."""
        assert self.guarded_pump is not None
        if self.guarded_pump.state == "emitting":
            self.guarded_pump.stop_emission(who=f"{who} (baseline needs the pump off)")
        settle = max(self.params.settle_time, 0.03, self.detector_settle)
        t0 = self.clock.now() + settle
        t1 = t0 + seconds
        self.wait_data_until(t1 + 0.01)
        self._apply_and_wait(Control("baseline", self.clock.now(), {"t_start": t0, "t_end": t1}, who))

    def capture_background(self, seconds: float = 0.3, who: str = "gainbench") -> str:
        """Pump on (emitting, at the run's current), probe shutter closed: ``seconds`` of the
        probe detector's pump-induced background (the sample's fluorescence, scattered pump),
        then the shutter opened again. Estimates restart from the reopening, after the settle
        time. Returns the consumer's text; MeasurementError if it cannot be taken."""
        assert self.guarded_pump is not None
        shutter = self.instruments.get("shutter")
        if shutter is None:
            raise MeasurementError(
                "capture background: no shutter is configured to block the probe; "
                "use a bench file with a shutter, or skip the background"
            )
        if self.guarded_pump.state != "emitting":
            raise MeasurementError("capture background: the pump must be on (emitting) at the run's current")
        settle = max(self.params.step_settle_time, self.params.settle_time, 0.03, self.detector_settle)
        shutter.close_shutter("probe")
        try:
            t0 = self.clock.now() + settle
            t1 = t0 + seconds
            self.wait_data_until(t1 + 0.01)
        finally:
            shutter.open_shutter("probe")
        resume = self.clock.now()
        return self._apply_and_wait(
            Control("background", resume, {"t_start": t0, "t_end": t1, "t_resume": resume}, who)
        )

    def _apply_and_wait(self, control: Control, timeout: float = 10.0) -> str:
        """Hand a capture to the consumer and wait for its outcome; MeasurementError if it failed."""
        assert self.consumer is not None
        before = len(self.consumer.procedure_results)
        self.control_q.put(control)
        deadline = time.monotonic() + timeout
        while len(self.consumer.procedure_results) <= before:
            self.check_alive()
            if time.monotonic() > deadline:
                raise MeasurementError(
                    f"{control.kind}: the pipeline did not apply it within {timeout:.0f} s"
                )
            time.sleep(0.005)
        kind, ok, text = self.consumer.procedure_results[before]
        if not ok:
            raise MeasurementError(f"{kind} capture failed: {text}")
        return text

    def set_mode(self, mode: str, settings: Mapping[str, Any] | None = None, who: str = "gainbench") -> None:
        from bench.estimator.mode import EMISSION_SETTINGS, mode_of

        self._check_mode(mode)
        settings = dict(settings or {})
        for key in mode_of(mode).settings:  # read from the instrument at open (the lock-in's filter)
            if key in EMISSION_SETTINGS:  # the consumer follows the guard's (see Consumer._follow_emission)
                continue
            if key not in settings and key in self.settings:
                settings[key] = self.settings[key]
        self.mode = mode
        self.settings = settings
        self.control_q.put(Control("mode", self.clock.now(), {"mode": mode, "settings": dict(settings)}, who))

    def set_current(self, current: float, who: str = "gainbench") -> None:
        """Set the pump current through the guard (which refuses values above its limit)."""
        assert self.guarded_pump is not None
        self.guarded_pump.set_current(current, who=who)
        power = self.cfg.pump.power_at(current)
        self.control_q.put(
            Control(
                "setting", self.clock.now(), {"pump_current": float(current), "pump_power": float(power)}, who
            )
        )

    def set_wavelength(self, wavelength: float, who: str = "gainbench", settle_timeout: float = 5.0) -> None:
        """Tune the probe (instrument of role ``wavelength``) and wait until it has settled.

        The estimator is told first, at the time of the command, so that no sample taken at the
        new wavelength counts in the step before; the new step's samples count from its
        ``step_settle_time`` on (the simulated QW-1 changes the light at the command; a source
        that drifts in for longer than that is not yet waited for by the estimator).
        """
        source = self.instruments["wavelength"]
        self.control_q.put(Control("setting", self.clock.now(), {"probe_wavelength": float(wavelength)}, who))
        source.set_wavelength(wavelength)
        source.wait_settled(settle_timeout)

    def probe_wavelength(self) -> float:
        """The tunable probe's wavelength now, m."""
        return self.instruments["wavelength"].wavelength()

    def tuning_range(self) -> tuple[float, float]:
        """(shortest, longest) wavelength of the tunable probe, m."""
        return self.instruments["wavelength"].tuning_range()

    def set_modulation(self, hz: float | None, who: str = "gainbench") -> None:
        pump = self.instruments["pump"]
        with stop_signals.shielded():  # never a pump exchange cut in half (see GuardedPump._run)
            pump.set_modulation(hz)
        self.control_q.put(
            Event(
                self.clock.now(),
                "setting",
                "pump modulation off" if hz is None else f"pump modulation {hz:g} Hz",
                who,
                data={"modulation_hz": hz},
            )
        )

    def set_operator(self, name: str) -> None:
        """The person running the measurement, once known (e.g. asked at the checklist)."""
        name = name.strip() if isinstance(name, str) else ""
        if not name:
            raise MeasurementError("operator: name the person running the measurement")
        self.operator = name
        if self.store is not None:
            self.store.set_meta(operator=name)
        self.control_q.put(Event(self.clock.now(), "run", f"operator: {name}", name, data={"operator": name}))

    def note(self, text: str, who: str | None = None) -> None:
        self.control_q.put(Event(self.clock.now(), "note", text, who or self.operator or "operator"))

    # -- arming ---------------------------------------------------------------------------------
    def checklist_items(self):
        return checklist.checklist_items(self.cfg)

    def pump_readings(self) -> dict[str, object]:
        return checklist.read_pump(self.instruments["pump"])

    def arm(self, answers, operator: str):
        """Judge the checklist answers; arm the guard if they pass. Returns the result."""
        assert self.guarded_pump is not None
        result = checklist.evaluate(
            self.checklist_items(), answers, self.pump_readings(), operator, clock=self.clock.now
        )
        for ev in result.records:
            self.control_q.put(ev)
        if result.passed:
            self.guarded_pump.arm(result, who=operator)
        return result

    def emit(self, who: str) -> None:
        assert self.guarded_pump is not None
        self.guarded_pump.emit(who)

    def stop_emission(self, who: str = "gainbench") -> None:
        assert self.guarded_pump is not None
        self.guarded_pump.stop_emission(who=who)

    def acknowledge(self, who: str) -> None:
        assert self.guarded_pump is not None
        self.guarded_pump.acknowledge(who)
