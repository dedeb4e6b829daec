"""The replay dashboard: a stored run on the same panels as a live one, read-only.

The run's blocks go through the same pipeline as live (`ReplayFeed`, a thread); the guard
panel shows what the guard did at that moment, from the stored events. Keys: pause, speed
up and down, seek, jump to the next or previous event. No key here drives an instrument.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding

from bench.dashboard.base_app import DashboardBase
from bench.dashboard.replay_feed import ReplayFeed
from bench.dashboard.replay_panel import ReplayPanel
from bench.dashboard.small_screens import HelpScreen
from bench.run.consumer import Snapshot

#: (keys, action, footer word, what it does).
KEYS = (
    ("question_mark,f1", "help", "help", "this list of keys"),
    ("space", "pause", "pause", "pause or resume"),
    ("full_stop,greater_than_sign", "speed(1)", "faster", "faster (up to ×100)"),
    ("comma,less_than_sign", "speed(-1)", "slower", "slower (down to ×0.1)"),
    ("right", "seek(5)", "+5 s", "seek 5 s forward"),
    ("left", "seek(-5)", "−5 s", "seek 5 s back (replays from the start up to there)"),
    ("shift+right", "seek(30)", "", "seek 30 s forward"),
    ("shift+left", "seek(-30)", "", "seek 30 s back"),
    ("home", "start", "", "back to the start"),
    (
        "n",
        "next_event",
        "next event",
        "jump to the next event (trip, guard change, fault, note, procedure, setting)",
    ),
    ("p", "previous_event", "prev", "jump to the previous event"),
    ("v", "swap_plots", "plots", "small terminals: show the other two plots"),
    ("q,ctrl+q", "quit", "quit", "leave the replay (the run file is not changed)"),
)


def help_rows() -> list[tuple[str, str]]:
    names = {
        "question_mark": "?",
        "full_stop": ".",
        "greater_than_sign": ">",
        "comma": ",",
        "less_than_sign": "<",
        "space": "space",
    }
    return [(" ".join(names.get(k, k) for k in keys.split(",")), does) for keys, _, _, does in KEYS]


class ReplayDashboard(DashboardBase):
    """The dashboard on a `ReplayFeed` (started on mount, stopped on unmount)."""

    BINDINGS = [Binding(k, a, w or a, show=bool(w)) for k, a, w, _ in KEYS]

    def __init__(self, feed: ReplayFeed, *, refresh_hz: float | None = None) -> None:
        sim = bool(feed.meta.get("simulated"))
        kwargs = {} if refresh_hz is None else {"refresh_hz": refresh_hz}
        cfg = feed.cfg
        super().__init__(
            bench_name=cfg.name,
            simulated=sim,
            power_at=cfg.pump.power_at,
            current_limit=min(cfg.guard.max_current, cfg.pump.max_current),
            replay_of=feed.run_id,
            **kwargs,
        )
        self.feed = feed
        try:
            self.file_bytes: int | None = os.path.getsize(feed.path)
        except OSError:
            self.file_bytes = None

    def side_panels(self) -> ComposeResult:
        yield ReplayPanel(id="replay-side")

    def setup(self) -> None:
        super().setup()
        self.panels["replay"] = self.screen_main.query_one(ReplayPanel)
        self.panels["guard"].source = "as recorded"
        self.panels["run"].run_id = self.feed.run_id
        self.feed.start()
        self.say("replay: read-only; space pauses, n jumps to the next event, ? lists the keys")

    def on_unmount(self) -> None:
        self.feed.stop()

    def read_snapshot(self, with_history: bool = True) -> Snapshot | None:
        return self.feed.snapshot(with_history=with_history)

    def tick(self) -> None:
        super().tick()
        if self.feed.error:
            self.panels["replay"].error = self.feed.error
            self.say(f"replay stopped: {self.feed.error}", "refused")

    def show_slow(self, snap: Snapshot) -> None:
        super().show_slow(snap)
        feed = self.feed
        pos = feed.position()
        run = self.panels["run"]
        state = (
            "»"
            if feed.seeking
            else "■"
            if feed.finished
            else "❚❚"
            if feed.paused
            else f"▶×{feed.speed:g}"
            if feed.speed
            else "▶max"
        )
        run.position = f"{pos:.1f}/{feed.end_t:.1f} s {state}"
        run.store_bytes = self.file_bytes
        run.flush_age = None
        panel = self.panels["replay"]
        panel.position = pos
        panel.end = feed.end_t
        panel.speed = feed.speed
        panel.paused = feed.paused
        panel.finished = feed.finished
        panel.seeking = feed.seeking
        panel.next_event = next((e for e in feed.targets if e.t > pos + 1e-6), None)

    def show_guard(self, snap: Snapshot) -> None:
        then = self.feed.guard()
        guard = self.panels["guard"]
        guard.reason = then.reason
        guard.state = then.state

    def events_of(self, snap: Snapshot):
        return self.feed.events_until(self.feed.position())[-50:]

    # -- keys -----------------------------------------------------------------------------
    def action_pause(self) -> None:
        self.feed.set_paused(not self.feed.paused)
        self.say("paused" if self.feed.paused else "playing")

    def action_speed(self, step: int) -> None:
        new = self.feed.faster(step)
        self.say(f"speed ×{new:g}")

    def action_seek(self, seconds: float) -> None:
        t = self.feed.seek(self.feed.position() + seconds)
        self.say(f"seeking to {t:.1f} s" + (" (from the start)" if seconds < 0 else ""))

    def action_start(self) -> None:
        self.feed.seek(0.0)
        self.say("back to the start")

    def action_next_event(self) -> None:
        ev = self.feed.next_event()
        self.say("no more events" if ev is None else f"at {ev.t:.2f} s: {ev.kind}: {ev.text}")

    def action_previous_event(self) -> None:
        ev = self.feed.previous_event()
        self.say("no earlier event" if ev is None else f"at {ev.t:.2f} s: {ev.kind}: {ev.text}")

    def action_help(self) -> None:
        note = "A replay drives no instrument; the guard panel shows the guard as recorded."
        self.push_screen(HelpScreen("keys (replay)", help_rows(), extra=note))


def run_replay_dashboard(
    path: str | Path, speed: float | None = None, overrides: Mapping[str, str] | None = None
) -> int:
    """Open the replay dashboard on run file ``path``; returns the exit status.

    ``speed`` is a multiple of real time; None (``--speed max``, the command's default) starts
    at real time, since a dashboard is for watching (``.`` goes up to ×100).
    """
    feed = ReplayFeed(path, overrides=overrides, speed=1.0 if speed is None else speed)
    app = ReplayDashboard(feed)
    try:
        app.run()
    finally:
        feed.stop()
    return int(app.return_code or 0)
