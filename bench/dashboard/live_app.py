"""The live dashboard: a `Measurement` on screen, and the procedures a person runs at the bench.

Every procedure that talks to an instrument or waits for data (dark, baseline, arming,
emission, the pump current, the mode's modulation, quitting) runs in a textual thread worker,
never on the event loop; workers report back through ``call_from_thread`` and never touch a
widget. The screen is fed by the base class's timer from ``Measurement.snapshot()``.

Quitting switches the pump off first, then asks, then closes the run (pump off, threads
stopped, run file closed) and leaves. The pump is also off whatever way the program ends,
since `run_live_dashboard` closes the measurement in a ``finally``.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Callable

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.worker import get_current_worker

from bench.checklist import ChecklistResult
from bench.dashboard.base_app import DashboardBase
from bench.dashboard.checklist_screen import ChecklistScreen
from bench.dashboard.guard_panel import GuardPanel
from bench.dashboard.health_panel import HealthPanel
from bench.dashboard.mode_screen import ModeChoice, ModeScreen
from bench.dashboard.small_screens import HelpScreen, NoteScreen, QuitScreen
from bench.dashboard.stats_poller import StatsPoller
from bench.dashboard.trip_screen import TripScreen
from bench.errors import GainbenchError
from bench.measurement import Measurement, default_current, sweep_currents
from bench.pipeline import Snapshot

log = logging.getLogger(__name__)

#: (keys, action, footer word, what it does) — the bindings and the help screen both come from here.
KEYS = (
    ("question_mark,f1", "help", "help", "this list of keys"),
    ("d", "dark", "dark", "capture the dark: the probe shutter closes for a moment, then opens"),
    ("b", "baseline", "baseline", "capture the baseline: pump off, wait for the medium to relax, "
                                  "then average probe/reference"),
    ("m", "mode", "mode", "choose the mode (watch, chopped, decay, sweep) and its timing"),
    ("a", "arm", "arm", "the arming checklist, one question at a time (arms the guard if it passes)"),
    ("e", "emit", "EMIT", "switch the pump output ON (armed only; in sweep mode runs the current steps)"),
    ("s", "stop", "pump off", "switch the pump output OFF (stays armed)"),
    ("ctrl+x", "stop", "", "pump output OFF from any screen, even while typing"),
    ("plus,equals_sign", "current(1)", "I+", "pump current up one step (the guard refuses above its limit)"),
    ("minus", "current(-1)", "I−", "pump current down one step"),
    ("k", "acknowledge", "ack trip", "show the trip and acknowledge it (refused while its cause holds)"),
    ("n", "note", "note", "add a note to the run"),
    ("v", "swap_plots", "plots", "small terminals: show the other two plots"),
    ("q,ctrl+q", "quit", "quit", "quit: pump off first, then confirm, then close the run"),
)


#: Keys that work on every screen, also while typing.
PRIORITY_KEYS = ("ctrl+x",)


def _bindings() -> list[Binding]:
    return [Binding(keys, action, word or action, show=bool(word), priority=keys in PRIORITY_KEYS)
            for keys, action, word, _ in KEYS]


def help_rows(keys=KEYS) -> list[tuple[str, str]]:
    """(keys as shown, what they do) for the help screen."""
    names = {"question_mark": "?", "equals_sign": "=", "plus": "+", "minus": "-"}
    rows = []
    for k, _, _, does in keys:
        shown = " ".join(names.get(part, part) for part in k.split(","))
        rows.append((shown, does))
    return rows


class LiveDashboard(DashboardBase):
    """The dashboard on an open `Measurement`.

    Parameters
    ----------
    measurement : Measurement
        Opened by the caller, who also closes it (closing twice is harmless).
    operator : str
        Who is at the bench (asked in the checklist when empty).
    current_step : float
        A, one press of the current keys.
    close_on_quit : bool
        Close the measurement in the quit flow (the run file is then complete).
    """

    BINDINGS = _bindings()

    def __init__(self, measurement: Measurement, *, operator: str = "", current_step: float = 0.25,
                 close_on_quit: bool = True, refresh_hz: float | None = None) -> None:
        cfg = measurement.cfg
        kwargs = {} if refresh_hz is None else {"refresh_hz": refresh_hz}
        super().__init__(bench_name=cfg.name, simulated=cfg.simulated, power_at=cfg.pump.power_at,
                         current_limit=min(cfg.guard.max_current, cfg.pump.max_current),
                         run_clock=lambda: measurement.clock.now(), **kwargs)  # open() sets a new clock
        if not current_step > 0:
            raise ValueError(f"current_step: {current_step!r} is not a positive current")
        self.meas = measurement
        self.operator = (operator or measurement.operator or "").strip()
        self.current_step = float(current_step)
        self.close_on_quit = close_on_quit
        self.setpoint = default_current(cfg)  # last value the guard accepted
        self.target = self.setpoint  # last value asked for
        self.choice = ModeChoice.defaults(cfg, measurement.mode)
        self.busy: str | None = None  # the procedure running (dark, baseline, mode, sweep)
        self.quitting = False
        self.stopping = threading.Event()  # set when the app leaves: workers end their loops
        self._current_lock = threading.Lock()
        self.poller: StatsPoller | None = None
        self.trip_screen: TripScreen | None = None
        self.closed_cleanly = False
        self.ready = False  # the measurement is open
        self.open_error: str | None = None

    def side_panels(self) -> ComposeResult:
        yield HealthPanel(id="health")

    def setup(self) -> None:
        super().setup()
        self.panels["health"] = self.screen_main.query_one(HealthPanel)
        self.panels["run"].recording = self.meas.record
        if self.meas.consumer is None:
            # Opened here, after the screen is up: the first layout and paint then do not
            # compete with the readers for the interpreter in the first second of the run.
            self.say("opening the bench: instruments, run file, pump output off…", "busy")
            self._open_worker()
        else:
            self._opened()

    @work(thread=True, group="open")
    def _open_worker(self) -> None:
        try:
            self.meas.open()
        except Exception as exc:  # reported on screen and by the exit status; the caller closes
            log.exception("opening the measurement")
            try:
                self.call_from_thread(self._open_failed, f"{type(exc).__name__}: {exc}")
            except RuntimeError:
                pass
        else:
            try:
                self.call_from_thread(self._opened)
            except RuntimeError:
                pass

    def _opened(self) -> None:
        self.ready = True
        self.poller = StatsPoller(self.meas.instruments).start()
        self.say(f"pump output off. Keys: d dark, b baseline, a arm, e emit, s pump off, ? help "
                 f"(current preset {self.setpoint:.2f} A)")
        self._preset_current(self.setpoint)
        if self.choice.modulation_hz is not None:  # started in chopped or decay mode
            self._mode_chosen(self.choice)

    def _open_failed(self, text: str) -> None:
        self.open_error = text
        self.say(f"could not open the bench: {text}", "refused")
        self.exit(2)

    def not_ready(self) -> bool:
        """True (and says so) while the bench is still opening."""
        if self.ready:
            return False
        self.say("wait: the bench is still opening", "refused")
        return True

    def on_unmount(self) -> None:
        self.stopping.set()
        if self.poller is not None:
            self.poller.stop()

    # -- the timer ------------------------------------------------------------------------
    def read_snapshot(self) -> Snapshot | None:
        if self.meas.consumer is None:
            return None
        return self.meas.snapshot()

    def show_snapshot(self, snap: Snapshot) -> None:
        super().show_snapshot(snap)
        run = self.panels["run"]
        run.run_id = self.meas.run_id
        run.elapsed = self.meas.clock.now()
        health = self.panels["health"]
        if self.poller is not None:
            stats, rates = self.poller.latest()
            health.show(stats, rates)
        health.sample_rate = snap.sample_rate
        if self.repaints % 10 == 0:
            health.latency = self.latency.figures(self.meas.speed)
        if self.trip_screen is not None and snap.trip_reason:
            self.trip_screen.show_reason(snap.trip_reason)

    @property
    def guard_state(self) -> str:
        return self.meas.guarded_pump.state

    @property
    def who(self) -> str:
        return self.operator or "dashboard operator"

    # -- trips ----------------------------------------------------------------------------
    def on_guard_panel_state_changed(self, message: GuardPanel.StateChanged) -> None:
        if message.new == "tripped":
            self.say(f"GUARD TRIPPED: {self.meas.guarded_pump.trip_reason or 'see the guard panel'}", "refused")
            self.open_trip_screen()
        elif message.old == "tripped" and message.new == "safe":
            self.say("trip acknowledged: guard back to SAFE; arm again through the checklist (a)", "done")

    def open_trip_screen(self) -> None:
        if self.trip_screen is not None:
            return
        reason = self.meas.guarded_pump.trip_reason or "(no reason recorded)"
        self.trip_screen = TripScreen(reason, acknowledge=lambda: self.meas.acknowledge(self.who), who=self.who)
        self.push_screen(self.trip_screen, callback=self._trip_closed)

    def _trip_closed(self, acknowledged: bool | None) -> None:
        self.trip_screen = None
        if not acknowledged:
            self.say("the guard is still TRIPPED: press k to acknowledge", "refused")

    def action_acknowledge(self) -> None:
        if self.not_ready():
            return
        if self.guard_state != "tripped":
            self.say(f"nothing to acknowledge: the guard is {self.guard_state}")
            return
        self.open_trip_screen()

    # -- procedures -----------------------------------------------------------------------
    def _start(self, name: str, text: str) -> bool:
        if self.not_ready():
            return False
        if self.quitting:
            self.say("quitting: no new procedures", "refused")
            return False
        if self.busy is not None:
            self.say(f"wait: {self.busy} is still running", "refused")
            return False
        self.busy = name
        self.say(text, "busy")
        return True

    def _finished(self, name: str, text: str, ok: bool) -> None:
        if self.busy == name:
            self.busy = None
        self.say(text, "done" if ok else "refused")

    def _run_procedure(self, name: str, fn: Callable[[], str]) -> None:
        """Worker body: ``fn`` returns the success text; a GainbenchError or ValueError is a refusal."""
        try:
            text, ok = fn(), True
        except (GainbenchError, ValueError) as exc:
            text, ok = f"{name}: {exc}", False
        try:
            self.call_from_thread(self._finished, name, text, ok)
        except RuntimeError:  # the app has gone
            pass

    def action_dark(self) -> None:
        if self._start("dark", "capturing the dark (probe shutter closed)…"):
            self._dark_worker()

    @work(thread=True, group="procedure")
    def _dark_worker(self) -> None:
        def dark() -> str:
            self.meas.capture_dark(who=self.who)
            return "dark captured (probe shutter open again)"
        self._run_procedure("dark", dark)

    def action_baseline(self) -> None:
        if self._start("baseline", "capturing the baseline (pump off)…"):
            self._baseline_worker()

    @work(thread=True, group="procedure")
    def _baseline_worker(self) -> None:
        def baseline() -> str:
            self.meas.capture_baseline(who=self.who)
            return "baseline captured (pump off)"
        self._run_procedure("baseline", baseline)

    def action_mode(self) -> None:
        if self.not_ready():
            return
        if self.busy is not None:
            self.say(f"wait: {self.busy} is still running", "refused")
            return
        self.push_screen(ModeScreen(self.choice), callback=self._mode_chosen)

    def _mode_chosen(self, choice: ModeChoice | None) -> None:
        if choice is None:
            self.say("mode unchanged")
            return
        if self._start("mode", f"changing to {choice.describe()}…"):
            self._mode_worker(choice)

    @work(thread=True, group="procedure")
    def _mode_worker(self, choice: ModeChoice) -> None:
        def change() -> str:
            cfg = self.meas.cfg
            settings = {} if choice.mode == "sweep" else {
                "pump_current": self.setpoint, "pump_power": cfg.pump.power_at(self.setpoint)}
            self.meas.set_modulation(choice.modulation_hz, who=self.who)
            self.meas.set_mode(choice.mode, settings, who=self.who)
            self.choice = choice
            return f"mode: {choice.describe()}"
        self._run_procedure("mode", change)

    # -- arming and emission --------------------------------------------------------------
    def action_arm(self) -> None:
        if self.not_ready():
            return
        state = self.guard_state
        if state == "emitting":
            self.say("already emitting: switch the pump off (s) before arming again", "refused")
            return
        if state == "tripped":
            self.say("the guard is TRIPPED: acknowledge the trip (k) before arming", "refused")
            self.open_trip_screen()
            return
        screen = ChecklistScreen(self.meas.checklist_items(), read_pump=self.meas.pump_readings,
                                 arm=self.meas.arm, clock=self.meas.clock.now, operator=self.operator)
        self.push_screen(screen, callback=self._checklist_closed)

    def _checklist_closed(self, result: ChecklistResult | None) -> None:
        if result is None:
            self.say("arming checklist cancelled: nothing armed")
        elif result.passed:
            self.operator = result.operator
            self.say(f"armed by {result.operator}; the pump output is still off (e emits)", "done")
        else:
            self.say("arming refused: " + "; ".join(result.refusals), "refused")

    def action_emit(self) -> None:
        if self.not_ready():
            return
        if self.quitting:
            self.say("quitting: emission refused", "refused")
            return
        if self.busy is not None:
            self.say(f"wait: {self.busy} is still running", "refused")
            return
        if self.choice.mode == "sweep":
            if self._start("sweep", "sweep: pump on, stepping the current…"):
                self._sweep_worker(self.choice)
            return
        self.say("switching the pump output on…", "busy")
        self._emit_worker(self.setpoint)

    @work(thread=True, group="emission")
    def _emit_worker(self, current: float) -> None:
        try:
            with self._current_lock:
                self.meas.set_current(current, who=self.who)
            self.meas.emit(self.who)
        except (GainbenchError, ValueError) as exc:
            self.say_from_thread(str(exc), "refused")
        else:
            self.say_from_thread(f"PUMP ON at {current:.2f} A ({self.meas.cfg.pump.power_at(current):.2f} W)", "done")

    @work(thread=True, group="procedure")
    def _sweep_worker(self, choice: ModeChoice) -> None:
        worker = get_current_worker()

        def stop_now() -> bool:
            return self.stopping.is_set() or worker.is_cancelled or self.guard_state != "emitting"

        def sweep() -> str:
            currents = sweep_currents(self.meas.cfg, choice.sweep_steps)
            with self._current_lock:
                self.meas.set_current(currents[0], who=self.who)
            self.meas.emit(self.who)
            done = 0
            for k, current in enumerate(currents):
                if stop_now():
                    break
                if k:
                    with self._current_lock:
                        self.meas.set_current(current, who=self.who)
                self.say_from_thread(f"sweep step {k + 1}/{len(currents)}: {current:.2f} A", "busy")
                self.meas.hold(choice.sweep_dwell, should_stop=stop_now)
                done += 1
            if self.guard_state == "emitting":
                self.meas.stop_emission(who=f"{self.who} (sweep finished)")
            with self._current_lock:
                self.meas.set_current(self.setpoint, who=self.who)
            return f"sweep: {done} of {len(currents)} steps done; pump off"
        self._run_procedure("sweep", sweep)

    def action_stop(self) -> None:
        if self.meas.guarded_pump is None:
            self.say("the bench is not open: its pump output was never switched on")
            return
        self.say("switching the pump output off…", "busy")
        self._stop_worker()

    @work(thread=True, group="stop")
    def _stop_worker(self) -> None:
        try:
            self.meas.stop_emission(who=self.who)
        except Exception as exc:  # the guard logs and trips itself; say what happened
            self.say_from_thread(f"pump off command: {exc}", "refused")
        else:
            self.say_from_thread(f"pump output OFF; guard {self.guard_state}", "done")

    def action_current(self, direction: int) -> None:
        if self.not_ready():
            return
        if self.busy == "sweep":
            self.say("the sweep sets the current: wait for it or stop it (s)", "refused")
            return
        target = max(0.0, round(self.target + direction * self.current_step, 6))
        self.target = target
        self._current_worker(target)

    def _preset_current(self, current: float) -> None:
        self._current_worker(current)

    @work(thread=True, group="current")
    def _current_worker(self, current: float) -> None:
        try:
            with self._current_lock:  # requests reach the guard one at a time
                self.meas.set_current(current, who=self.who)
        except (GainbenchError, ValueError) as exc:
            try:
                self.call_from_thread(self._current_refused, str(exc))
            except RuntimeError:
                pass
        else:
            try:
                self.call_from_thread(self._current_set, current)
            except RuntimeError:
                pass

    def _current_set(self, current: float) -> None:
        self.setpoint = current
        power = self.meas.cfg.pump.power_at(current)
        self.say(f"pump current set to {current:.2f} A ({power:.2f} W)", "done")

    def _current_refused(self, text: str) -> None:
        self.target = self.setpoint
        self.say(text, "refused")

    # -- notes, help, quit ----------------------------------------------------------------
    def action_note(self) -> None:
        if self.not_ready():
            return
        self.push_screen(NoteScreen(), callback=self._note_written)

    def _note_written(self, text: str | None) -> None:
        if text:
            self.meas.note(text, who=self.operator or None)  # a queue put: never blocks
            self.say(f"note stored: {text}", "done")
        else:
            self.say("no note stored")

    def action_help(self) -> None:
        step = f"One press of + or - changes the pump current by {self.current_step:g} A."
        self.push_screen(HelpScreen("keys (live)", help_rows(), extra=step))

    async def action_quit(self) -> None:
        if self.quitting:
            return
        if not self.ready and self.open_error is None:
            self.say("wait: the bench is still opening (its pump output is off)", "refused")
            return
        self.quitting = True
        self.say("quitting: switching the pump output off first…", "busy")
        self._quit_pump_off()

    @work(thread=True, group="quit")
    def _quit_pump_off(self) -> None:
        try:
            if self.meas.guarded_pump is None:
                raise GainbenchError("the bench did not open")
            self.meas.stop_emission(who=f"{self.who} (quitting)")
            text = f"The pump output is OFF (guard {self.guard_state})."
        except Exception as exc:  # still ask: quitting closes the run, which commands the pump off again
            text = f"The pump off command failed ({exc}); closing the run commands it off again."
        try:
            self.call_from_thread(self._ask_quit, text)
        except RuntimeError:
            pass

    def _ask_quit(self, text: str) -> None:
        self.say(text, "done")
        self.push_screen(QuitScreen(text), callback=self._quit_answered)

    def _quit_answered(self, yes: bool | None) -> None:
        if not yes:
            self.quitting = False
            self.say("still here; the pump output is off")
            return
        self.say("closing the run (pump off, readers stopped, file closed)…", "busy")
        self._close_worker()

    @work(thread=True, group="quit")
    def _close_worker(self) -> None:
        self.stopping.set()
        if self.close_on_quit:
            try:
                self.meas.close(reason="stopped from the dashboard")
                self.closed_cleanly = True
            except Exception:  # the close logs; leave anyway, the caller closes again
                log.exception("closing the measurement")
        try:
            self.call_from_thread(self.exit, 0)
        except RuntimeError:
            pass
