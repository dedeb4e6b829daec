"""The live dashboard: a `Measurement` on screen, its keys, trips, notes and quitting.

The bench procedures behind the keys (dark, baseline, mode, arming, emission, pump current)
are in `bench.dashboard.pump_actions`. Everything that talks to an instrument or waits for
data runs in a textual thread worker, never on the event loop; workers report back through
``call_from_thread`` and never touch a widget. The screen is fed by the base class's timer
from ``Measurement.snapshot()``. An unopened measurement is opened in a worker once the
screen is up.

Quitting switches the pump off first, then asks, then closes the run (pump off, threads
stopped, run file closed) and leaves. The pump is also off whatever way the program ends:
``gainbench live`` (`bench.commands.live`) closes the measurement in a ``finally``.
"""

from __future__ import annotations

import logging
import threading

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding

from bench.dashboard.base_app import DashboardBase
from bench.dashboard.guard_panel import GuardPanel
from bench.dashboard.health_panel import HealthPanel
from bench.dashboard.mode_screen import ModeChoice
from bench.dashboard.pump_actions import BenchActions
from bench.dashboard.small_screens import HelpScreen, NoteScreen, QuitScreen
from bench.dashboard.stats_poller import StatsPoller
from bench.dashboard.trip_screen import TripScreen
from bench.errors import GainbenchError
from bench.run.consumer import Snapshot
from bench.run.measurement import Measurement
from bench.run.pump_program import default_current

log = logging.getLogger(__name__)

#: (keys, action, footer word, what it does) — the bindings and the help screen both come from here.
KEYS = (
    ("question_mark,f1", "help", "help", "this list of keys"),
    ("d", "dark", "dark", "capture the dark: the probe shutter closes for a moment, then opens"),
    (
        "b",
        "baseline",
        "baseline",
        "capture the baseline: pump off, wait for the medium to relax, then average probe/reference",
    ),
    (
        "g",
        "background",
        "",
        "capture the pump-induced background (pump on, watch mode): the probe shutter closes for a moment "
        "and the probe detector's fluorescence and scattered pump level is subtracted from then on",
    ),
    ("m", "mode", "mode", "choose the mode (watch, chopped, decay, sweep, lockin) and its timing"),
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
    return [
        Binding(keys, action, word or action, show=bool(word), priority=keys in PRIORITY_KEYS)
        for keys, action, word, _ in KEYS
    ]


def help_rows(keys=KEYS) -> list[tuple[str, str]]:
    """(keys as shown, what they do) for the help screen."""
    names = {"question_mark": "?", "equals_sign": "=", "plus": "+", "minus": "-"}
    rows = []
    for k, _, _, does in keys:
        shown = " ".join(names.get(part, part) for part in k.split(","))
        rows.append((shown, does))
    return rows


class LiveDashboard(BenchActions, DashboardBase):
    """The dashboard on an open `Measurement`.

    Parameters
    ----------
    measurement : Measurement or RemoteMeasurement
        Closed by the caller (closing twice is harmless); opened here if it is not open yet.
        `gainbench live` passes a `bench.run.measurement_process.RemoteMeasurement`: the bench in a
        process of its own.
    operator : str
        Who is at the bench (asked in the checklist when empty).
    current_step : float
        A, one press of the current keys.
    close_on_quit : bool
        Close the measurement in the quit flow (the run file is then complete).
    """

    BINDINGS = _bindings()

    def __init__(
        self,
        measurement: Measurement,
        *,
        operator: str = "",
        current_step: float = 0.25,
        close_on_quit: bool = True,
        refresh_hz: float | None = None,
    ) -> None:
        cfg = measurement.cfg
        kwargs = {} if refresh_hz is None else {"refresh_hz": refresh_hz}
        super().__init__(
            bench_name=cfg.name,
            simulated=cfg.simulated,
            power_at=cfg.pump.power_at,
            current_limit=min(cfg.guard.max_current, cfg.pump.max_current),
            run_clock=lambda: measurement.clock.now(),
            **kwargs,
        )  # open() sets a new clock
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
        self.bench_lost: str | None = None  # why the bench (process) stopped answering

    def side_panels(self) -> ComposeResult:
        yield HealthPanel(id="health")

    def setup(self) -> None:
        super().setup()
        self.panels["health"] = self.screen_main.query_one(HealthPanel)
        self.panels["run"].recording = self.meas.record
        if not self.meas.is_open:
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
        self.say(
            f"pump output off. Keys: d dark, b baseline, a arm, e emit, s pump off, ? help "
            f"(current preset {self.setpoint:.2f} A)"
        )
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
    def read_snapshot(self, with_history: bool = True) -> Snapshot | None:
        if not self.meas.is_open or self.bench_lost is not None:
            return None
        try:
            return self.meas.snapshot(with_history=with_history)
        except GainbenchError as exc:  # the bench process has gone (RemoteMeasurement)
            self.bench_lost = str(exc)
            self.panels["guard"].reason = f"BENCH LOST: {exc}"
            self.say(f"THE BENCH HAS STOPPED ANSWERING: {exc}", "refused")
            return None

    def show_snapshot(self, snap: Snapshot) -> None:
        super().show_snapshot(snap)
        if self.trip_screen is not None and snap.trip_reason:
            self.trip_screen.show_reason(snap.trip_reason)

    def show_slow(self, snap: Snapshot) -> None:
        super().show_slow(snap)
        run = self.panels["run"]
        run.run_id = self.meas.run_id
        run.elapsed = self.meas.clock.now()
        health = self.panels["health"]
        if self.poller is not None:
            stats, rates = self.poller.latest()
            health.show(stats, rates)
        health.sample_rate = snap.sample_rate
        health.latency = self.latency.figures(self.meas.speed)

    @property
    def guard_state(self) -> str:
        return self.meas.guarded_pump.state

    @property
    def who(self) -> str:
        return self.operator or "dashboard operator"

    # -- trips ----------------------------------------------------------------------------
    def on_guard_panel_state_changed(self, message: GuardPanel.StateChanged) -> None:
        if message.new == "tripped":
            self.say(
                f"GUARD TRIPPED: {self.meas.guarded_pump.trip_reason or 'see the guard panel'}", "refused"
            )
            self.open_trip_screen()
        elif message.old == "tripped" and message.new == "safe":
            self.say("trip acknowledged: guard back to SAFE; arm again through the checklist (a)", "done")

    def open_trip_screen(self) -> None:
        if self.trip_screen is not None:
            return
        reason = self.meas.guarded_pump.trip_reason or "(no reason recorded)"
        self.trip_screen = TripScreen(
            reason, acknowledge=lambda: self.meas.acknowledge(self.who), who=self.who
        )
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
