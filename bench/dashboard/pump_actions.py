"""The bench procedures of the live dashboard, as keys: dark, baseline, mode, arming,
emission (and the sweep program), pump off, pump current.

A mixin of `bench.dashboard.live_app.LiveDashboard`, kept apart so that each file has one job.
Every procedure that talks to an instrument or waits for data runs in a textual thread worker;
workers report through ``call_from_thread`` and never touch a widget. The guard judges every
request (`bench.safety.guarded_pump.GuardedPump`); a refusal is shown in its own words.

The app provides: ``meas`` (the `Measurement`), ``say``, ``say_from_thread``, ``not_ready``,
``who``, ``guard_state``, ``open_trip_screen``, and the attributes ``busy``, ``quitting``,
``choice``, ``setpoint``, ``target``, ``stopping`` and ``_current_lock``.
"""

from __future__ import annotations

from collections.abc import Callable

from textual import work
from textual.worker import get_current_worker

from bench.dashboard.checklist_screen import ChecklistScreen
from bench.dashboard.mode_screen import ModeChoice, ModeScreen
from bench.errors import GainbenchError
from bench.estimator.mode import mode_of
from bench.run.pump_program import sweep_currents
from bench.safety.checklist import ChecklistResult


class BenchActions:
    """Key actions and workers for the bench procedures (see the module docstring)."""

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

    def action_background(self) -> None:
        if self._start("background", "capturing the background (pump on, probe shutter closed)…"):
            self._background_worker()

    @work(thread=True, group="procedure")
    def _background_worker(self) -> None:
        def background() -> str:
            return self.meas.capture_background(who=self.who)

        self._run_procedure("background", background)

    def action_mode(self) -> None:
        if self.not_ready():
            return
        if self.busy is not None:
            self.say(f"wait: {self.busy} is still running", "refused")
            return
        self.push_screen(ModeScreen(self.choice, check=self._check_timing), callback=self._mode_chosen)

    def _check_timing(self, choice: ModeChoice) -> None:
        """Refuse a pump period that leaves the mode no settled data (`bench.estimator.timing`)."""
        from bench.estimator.timing import run_period

        if mode_of(choice.mode).steps_pump:  # every step chopped: judged at the lowest step (slowest rise)
            lowest = sweep_currents(self.meas.cfg, choice.sweep_steps)[0]
            run_period(self.meas.cfg, "chopped", lowest, choice.chop_period)
        elif choice.period is not None:
            run_period(self.meas.cfg, choice.mode, self.setpoint, choice.period)

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
            mode = mode_of(choice.mode)
            settings = (
                dict(mode.run_settings)
                if mode.steps_pump
                else {"pump_current": self.setpoint, "pump_power": cfg.pump.power_at(self.setpoint)}
            )
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
        screen = ChecklistScreen(
            self.meas.checklist_items(),
            read_pump=self.meas.pump_readings,
            arm=self.meas.arm,
            clock=self.meas.clock.now,
            operator=self.operator,
        )
        self.push_screen(screen, callback=self._checklist_closed)

    def _checklist_closed(self, result: ChecklistResult | None) -> None:
        if result is None:
            self.say("arming checklist cancelled: nothing armed")
        elif result.passed:
            self.operator = result.operator
            self.say(f"armed by {result.operator}; the pump output is still off (e emits)", "done")
        else:
            first = result.refusals[0] if result.refusals else "see the checklist"
            self.say(f"arming refused: {first}", "refused")

    def action_emit(self) -> None:
        if self.not_ready():
            return
        if self.quitting:
            self.say("quitting: emission refused", "refused")
            return
        if self.busy is not None:
            self.say(f"wait: {self.busy} is still running", "refused")
            return
        if mode_of(self.choice.mode).steps_pump:
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
            self.say_from_thread(
                f"PUMP ON at {current:.2f} A ({self.meas.cfg.pump.power_at(current):.2f} W)", "done"
            )

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
            # the current stays at the last step: setting it again would start a new step
            last = currents[max(0, done - 1)]
            try:
                self.call_from_thread(self._current_set, last)
            except RuntimeError:
                pass
            return f"sweep: {done} of {len(currents)} steps done; pump off, current left at {last:.2f} A"

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
        self.setpoint = self.target = current
        power = self.meas.cfg.pump.power_at(current)
        self.say(f"pump current set to {current:.2f} A ({power:.2f} W)", "done")

    def _current_refused(self, text: str) -> None:
        self.target = self.setpoint
        self.say(text, "refused")
