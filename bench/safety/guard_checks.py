"""The guard on a live bench: the trip monitor, the guarded pump, and the checks' threads.

`GuardChecks` is what a `bench.run.measurement.Measurement` holds for the guard. It makes the
`TripMonitor` (its limits scaled to the run clock of an accelerated simulated bench) and the
`GuardedPump` (which commands the pump off at once), and runs the checks where the readings
arrive, never behind the consumer:

- `on_block` and `on_comm` are the readers' hooks: every pump and detector block, and every
  exchange's outcome, is judged in the reader's thread as it arrives; a pump reading showing the
  output on while the guard has not let it emit has the guard command it off again;
- a watchdog thread trips on stale readings (it never talks to an instrument: a silent
  instrument must not hold up the very check that notices it);
- a pump-check thread, while the pump emits, reads the pump driver's error queue and compares
  the bench file's power calibration with the driver's power reading and the pump monitor.

A second safety layer only: it never replaces the hardware interlock, the laser safety officer,
ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

import logging
import math
import threading
from collections.abc import Callable, Mapping
from dataclasses import replace
from typing import Any

import numpy as np

from bench.config import BenchConfig
from bench.estimator.mode import mode_of
from bench.records import PUMP_CURRENT, PUMP_MONITOR, PUMP_SETPOINT, Block, Event
from bench.safety.guard import EMITTING
from bench.safety.guarded_pump import GuardedPump
from bench.safety.pump_port import GuardPumpPort, PumpAccess
from bench.safety.trip_monitor import POLL_SPAN, TripMonitor
from drivers.errors import InstrumentError

log = logging.getLogger(__name__)

#: Real s between reads of the pump driver's error queue while the pump emits: a device fault
#: the driver reports there (and nowhere else) trips the guard.
ERROR_POLL = 0.25

#: Run-clock s of the newest pump-monitor data averaged for the power-calibration check.
MONITOR_SPAN = 0.01

#: Real s between two stale-reading checks (20 a second).
STALE_POLL = 0.05


class GuardChecks:
    """The guard's monitor, guarded pump and checks for one live run (see the module notes).

    Parameters
    ----------
    cfg : BenchConfig
    pump : driver
        The pump driver (the guard reaches it through a `GuardPumpPort`; the pump checks, which
        wait their turn, through the driver itself).
    shutter : driver or None
    clock : RunClock
        The run clock (its ``now``).
    speed : float
        The simulated bench's speed (1 on a real bench).
    event_sink : callable
        Takes every guard `Event` and the checks' fault events.
    stop : threading.Event
        Set when the run stops; the threads end then.
    mode : callable
        Returns the estimator's mode and settings now (they change during a run).
    """

    def __init__(
        self,
        cfg: BenchConfig,
        pump: Any,
        shutter: Any,
        clock: Any,
        *,
        speed: float,
        event_sink: Callable[[Event], None],
        stop: threading.Event,
        mode: Callable[[], tuple[str, Mapping[str, Any]]],
    ) -> None:
        self.cfg = cfg
        self.pump = pump
        self.clock = clock
        self.event_sink = event_sink
        self.stop = stop
        self.mode = mode
        #: From the estimator's parameters (`use_params`): the detector's range, V, and the pump
        #: monitor's V per W of pump power.
        self.detector_range: float | Mapping[str, float] | None = None
        self.monitor_per_watt: float | None = None
        guard_cfg = cfg.guard
        if speed != 1.0:
            # Times are run-clock (simulated) seconds: an instrument silent for stale_after of
            # real time is silent for speed times that on the run clock.
            guard_cfg = replace(guard_cfg, stale_after=guard_cfg.stale_after * speed)
        # Transport delays are real time too: at speed X they span X times as much run-clock time.
        self.monitor = TripMonitor(guard_cfg, started_at=clock.now(), lag_allowance=POLL_SPAN * speed)
        self.pump_access = PumpAccess()
        self.guarded_pump = GuardedPump.from_config(
            GuardPumpPort(pump, self.pump_access),
            cfg,
            shutter=shutter,
            clock=clock.now,
            event_sink=event_sink,
            monitor=self.monitor,
        )
        self.guarded_pump.start(who="gainbench (start: pump output off)")
        self._monitor_level: tuple[float, float] | None = None  # (run-clock t, V) of the pump monitor
        self._threads: list[threading.Thread] = []

    def use_params(self, params: Any) -> None:
        """Take the detector range and the pump monitor's responsivity from the estimator's parameters."""
        self.detector_range = params.detector_range
        self.monitor_per_watt = params.monitor_per_watt

    # -- the readers' hooks ---------------------------------------------------------------------
    def on_block(self, block: Block) -> None:
        """Judge one block in the reader's thread, as it arrives."""
        gp, mon = self.guarded_pump, self.monitor
        now = self.clock.now()
        if block.source == "detector" and block.n and PUMP_MONITOR in block.channels:
            k = max(1, min(block.n, int(round(MONITOR_SPAN / block.dt)) if block.dt > 0 else 1))
            self._monitor_level = (block.t_end, float(np.mean(block.column(PUMP_MONITOR)[-k:])))
        if block.source == "pump":
            found = mon.feed_pump(
                block,
                output_off_since=gp.output_off_since,
                output_on_since=gp.output_on_since,
                received_at=now,
            )
        elif block.source == "detector":
            mode = mode_of(self.mode()[0])  # held at one level the whole run: steady and never stepped
            found = mon.feed_detector(
                block,
                # no range configured (a lock-in's auxiliary inputs): freshness is still judged
                self.detector_range if self.detector_range is not None else math.inf,
                pump_steady=mode.pump_steady(self.mode()[1]) and not mode.steps_pump,
                received_at=now,
            )
        else:
            return
        if found:
            gp.trip_on(found)
        if block.source == "pump":
            gp.recommand_off(block)

    def on_comm(self, status: Any) -> None:
        """Judge one exchange's outcome (a `bench.run.readers.CommStatus`)."""
        found = self.monitor.comm_result(status.source, status.ok, status.t, status.detail, lost=status.lost)
        if found:
            self.guarded_pump.trip_on(found)

    # -- the threads ----------------------------------------------------------------------------
    def start_threads(self) -> None:
        """Start the stale-reading watchdog and the pump checks."""
        self._threads = [
            threading.Thread(target=self._watch_stale, name="guard-watch", daemon=True),
            threading.Thread(target=self._pump_checks, name="pump-checks", daemon=True),
        ]
        for thread in self._threads:
            thread.start()

    def join(self, timeout: float) -> None:
        """Wait (at most ``timeout`` s each) for the threads to end once ``stop`` is set."""
        for thread in self._threads:
            thread.join(timeout)

    def _watch_stale(self) -> None:
        """Trips when an instrument has given no fresh reading for too long (20 checks a second).

        It never talks to an instrument: a slow or silent instrument must not hold up the very
        check that notices it (the pump checks that do talk run in `_pump_checks`)."""
        while not self.stop.wait(STALE_POLL):
            try:
                found = self.monitor.check_stale(self.clock.now())
                if found:
                    self.guarded_pump.trip_on(found)
            except Exception:
                log.exception("stale-reading check failed")

    def _pump_checks(self) -> None:
        """While the pump emits, every `ERROR_POLL` s: read the pump driver's error queue and
        compare its power reading with the bench file's calibration. These exchanges can take
        as long as the driver's timeout, so they have this thread of their own."""
        while not self.stop.wait(ERROR_POLL):
            try:
                self.poll_pump_errors()
            except Exception:
                log.exception("reading the pump driver's error queue failed")
            try:
                self.check_power_calibration()
            except Exception:
                log.exception("the pump power calibration check failed")

    # -- the pump checks --------------------------------------------------------------------------
    def poll_pump_errors(self) -> None:
        """While emitting: an entry in the pump driver's error queue trips (`device_error`)."""
        if self.guarded_pump.state != EMITTING:
            return
        self.pump_access.wait_for_turn()  # the guard's own commands go first
        try:
            entries = self.pump.instrument_errors()
        except InstrumentError:  # a failed exchange: the pump reader's checks deal with those
            return
        if not entries:
            return
        now = self.clock.now()
        found = self.monitor.feed_error_queue("pump driver", [(e.code, e.text) for e in entries], now)
        for condition in found[:1]:
            self.event_sink(
                Event(
                    now,
                    "fault",
                    condition.reason,
                    data={"source": "pump", "errors": [[e.code, e.text] for e in entries]},
                )
            )
        self.guarded_pump.trip_on(found[:1])

    def check_power_calibration(self) -> None:
        """While the pump emits at a settled current, compare the bench file's power calibration
        with the driver's power reading (profiles with ``power``) and, in steady modes, with the
        pump monitor through its responsivity; a disagreement trips (`power_calibration`)."""
        gp, mon = self.guarded_pump, self.monitor
        on_since = gp.output_on_since
        now = self.clock.now()
        if gp.state != EMITTING or on_since is None or now - on_since < mon.output_grace:
            return
        values = mon.latest().values
        if PUMP_CURRENT not in values or PUMP_SETPOINT not in values:
            return
        t_i, current = values[PUMP_CURRENT]
        if t_i <= on_since or abs(current - values[PUMP_SETPOINT][1]) > self.cfg.guard.current_tolerance:
            return  # not settled at its setpoint yet (or a sweep step is under way)
        expected = self.cfg.pump.power_at(current)
        found = []
        pump = self.pump
        changed = gp.changed_at
        if t_i <= changed:
            return  # the current reading is older than the last change (a sweep step)
        if pump.session.has("power"):
            self.pump_access.wait_for_turn()
            try:
                measured = pump.power()
            except InstrumentError:  # a failed exchange: the pump reader's checks deal with those
                measured = None
            if gp.changed_at != changed:
                measured = None  # the current changed while the power was read: compare next time
            if measured is not None:
                found += mon.feed_power(expected, measured, current, "the pump driver's power reading", now)
        level = self._monitor_level
        per_watt = self.monitor_per_watt
        if (
            level is not None
            and per_watt
            and self._pump_steady()
            and level[0] > max(on_since, t_i)
            and now - level[0] < 1.0
        ):
            found += mon.feed_power(
                expected,
                level[1] / per_watt,
                current,
                f"the pump monitor ({level[1]:.4g} V at {per_watt:.4g} V/W)",
                now,
            )
        if found:
            gp.trip_on(found[:1])

    def _pump_steady(self) -> bool:
        """Whether this mode keeps the pump at a steady level while it emits (the mode table's
        `pump_steady`: watch, and a sweep measured with steady steps)."""
        mode, settings = self.mode()
        return mode_of(mode).pump_steady(settings)
