"""A stored run fed through the pipeline in a thread, paced by a play clock that pauses, changes
speed and seeks.

`bench.run.replay.replay` runs at full speed (``speed=None``) in one thread; its ``on_block``
callback paces it against the play clock, and its ``should_stop`` ends a pass early. Seeking
forward fast-forwards (no pacing) to the target; seeking backward starts a new pass from the
beginning and fast-forwards to the target: simple, and exactly what a live run would have
shown at that time, since the estimator is a pure function of the blocks.

What the guard did is read from the stored events (`guard_at`), since a replay drives no
pump. The display reads `snapshot()` from its timer; nothing here touches a widget.
"""

from __future__ import annotations

import bisect
import logging
import math
import threading
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from bench.errors import GainbenchError
from bench.records import Block, Event
from bench.run.consumer import Consumer, Snapshot
from bench.store import RunReader

log = logging.getLogger(__name__)

#: Event kinds that "next event" stops at (guard events only when the state changed).
JUMP_KINDS = ("trip", "guard", "fault", "drop", "gap", "note", "procedure", "setting")

#: Speeds offered by faster / slower.
SPEEDS = (0.1, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0, 30.0, 100.0)


@dataclass(frozen=True)
class GuardThen:
    """The guard as recorded at a moment: state, the trip reason if tripped, the event that set it."""

    state: str | None
    reason: str
    event: Event | None


def guard_at(events: Sequence[Event], t: float) -> GuardThen:
    """The guard's state at run time ``t`` from stored ``events`` (sorted by time)."""
    state, reason, last = None, "", None
    for ev in events:
        if ev.t > t:
            break
        if ev.kind not in ("guard", "trip") or not ev.data.get("accepted", True):
            continue
        to = ev.data.get("to")
        if isinstance(to, str):
            state, last = to, ev
            if to == "tripped" and ev.kind == "trip":
                reason = str(ev.data.get("reason") or ev.text).removeprefix("trip: ")
            elif to != "tripped":
                reason = ""
    return GuardThen(state, reason, last)


def jump_targets(events: Sequence[Event]) -> list[Event]:
    """Events worth stopping at: trips, guard changes, faults, drops, notes, procedures, settings."""
    out = []
    for ev in events:
        if ev.kind not in JUMP_KINDS:
            continue
        if ev.kind == "guard" and (
            ev.data.get("from") == ev.data.get("to") or not ev.data.get("accepted", True)
        ):
            continue
        out.append(ev)
    return out


class ReplayFeed:
    """Replays ``path`` in a thread; see the module docstring.

    Parameters
    ----------
    path : run file.
    overrides : bench-file keys for a re-analysis (``{"sample.length": "5.1 mm"}``).
    speed : multiple of real time; None for as fast as the machine goes.
    """

    def __init__(
        self, path: str | Path, overrides: Mapping[str, str] | None = None, speed: float | None = 1.0
    ) -> None:
        if speed is not None and not (math.isfinite(speed) and speed > 0):
            raise ValueError(f"speed: {speed!r} is not a positive number")
        self.path = Path(path)
        self.overrides = dict(overrides or {})
        from bench.run.replay import run_config

        with RunReader(self.path) as reader:
            self.cfg = run_config(reader, self.overrides)  # the bench file as recorded
            self.run_id = reader.run_id
            self.meta = dict(reader.meta)
            self.events = sorted(reader.events(), key=lambda e: e.t)
            self.blocks_total = reader.block_count()
        self._times = [e.t for e in self.events]
        self.targets = jump_targets(self.events)
        self.end_t = max(self._times, default=0.0)
        self.speed = speed
        self._lock = threading.Lock()
        self._consumer: Consumer | None = None
        self._anchor_pos = 0.0
        self._anchor_wall = time.monotonic()
        self.paused = False
        self._ff_target: float | None = None  # fast-forwarding to this time
        self._restart = threading.Event()
        self._stop = threading.Event()
        self._wake = threading.Event()
        self.finished = False
        self.error: str | None = None
        self.passes = 0
        self._thread = threading.Thread(target=self._run, name="replay-feed", daemon=True)

    # -- the play clock -------------------------------------------------------------------
    def position(self) -> float:
        """Run-clock time being shown (s)."""
        with self._lock:
            if self._ff_target is not None:
                return self._ff_target
            if self.speed is None:
                c = self._consumer
                return c.data_time if c is not None else 0.0
            if self.paused or self.finished or self._consumer is None:
                return self._anchor_pos  # also before the first block: the clock waits for it
            return self._anchor_pos + (time.monotonic() - self._anchor_wall) * self.speed

    def _anchor(self, pos: float) -> None:
        self._anchor_pos, self._anchor_wall = pos, time.monotonic()

    def set_paused(self, paused: bool) -> None:
        pos = self.position()
        with self._lock:
            self.paused = bool(paused)
            self._anchor(pos)
        self._wake.set()

    def set_speed(self, speed: float | None) -> None:
        if speed is not None and not (math.isfinite(speed) and speed > 0):
            raise ValueError(f"speed: {speed!r} is not a positive number")
        pos = self.position()
        with self._lock:
            self.speed = speed
            self._anchor(pos)
        self._wake.set()

    def faster(self, step: int = 1) -> float | None:
        """Next speed up (``step`` = -1: down) in `SPEEDS`; returns the new speed."""
        current = self.speed if self.speed is not None else SPEEDS[-1]
        i = min(range(len(SPEEDS)), key=lambda k: abs(math.log(SPEEDS[k] / current)))
        new = SPEEDS[max(0, min(len(SPEEDS) - 1, i + step))]
        self.set_speed(new)
        return new

    def seek(self, t: float) -> float:
        """Show run time ``t`` (clipped to the run); returns the time sought."""
        t = max(0.0, min(float(t), self.end_t))
        c = self._consumer
        backward = c is None or t < c.data_time
        with self._lock:
            self._ff_target = t
            self.finished = False
            self._anchor(t)
        if backward:
            self._restart.set()
        self._wake.set()
        return t

    def next_event(self, after: float | None = None) -> Event | None:
        """Seek to the first jump target after ``after`` (default: now); None at the end."""
        now = self.position() if after is None else after
        for ev in self.targets:
            if ev.t > now + 1e-6:
                self.seek(ev.t)
                return ev
        return None

    def previous_event(self) -> Event | None:
        now = self.position()
        earlier = [ev for ev in self.targets if ev.t < now - 0.5]
        if not earlier:
            return None
        self.seek(earlier[-1].t)
        return earlier[-1]

    # -- what the display reads -----------------------------------------------------------
    def snapshot(self, with_history: bool = True) -> Snapshot | None:
        c = self._consumer
        return None if c is None else c.snapshot(with_history=with_history)

    def guard(self) -> GuardThen:
        return guard_at(self.events, self.position())

    def events_until(self, t: float) -> tuple[Event, ...]:
        return tuple(self.events[: bisect.bisect_right(self._times, t)])

    @property
    def seeking(self) -> bool:
        return self._ff_target is not None

    # -- the thread -----------------------------------------------------------------------
    def start(self) -> ReplayFeed:
        self._thread.start()
        return self

    def stop(self, timeout: float = 5.0) -> None:
        self._stop.set()
        self._wake.set()
        if self._thread.is_alive():
            self._thread.join(timeout)

    @property
    def alive(self) -> bool:
        return self._thread.is_alive()

    def _should_stop(self) -> bool:
        return self._stop.is_set() or self._restart.is_set()

    def _run(self) -> None:
        from bench.run.replay import replay

        while not self._stop.is_set():
            self._restart.clear()
            self.passes += 1
            try:
                replay(
                    self.path,
                    overrides=self.overrides,
                    speed=None,
                    store=False,
                    on_block=self._on_block,
                    should_stop=self._should_stop,
                )
            except GainbenchError as exc:
                self.error = str(exc)
                log.error("replay of %s: %s", self.path, exc)
                return
            if self._stop.is_set():
                return
            if self._restart.is_set():
                continue
            with self._lock:  # the run has ended: hold the last picture until a seek
                c = self._consumer
                self.end_t = max(self.end_t, c.data_time if c is not None else 0.0)
                self._ff_target = None
                self._anchor(self.end_t)
                self.finished = True
            while not (self._stop.is_set() or self._restart.is_set()):
                self._wake.wait(0.2)
                self._wake.clear()

    def _on_block(self, consumer: Consumer, block: Block) -> None:
        first = self._consumer is None
        self._consumer = consumer
        t = block.t0  # blocks come in order of their first sample: every reading before t is in
        with self._lock:
            if first and self._ff_target is None:
                self._anchor(block.t0)  # the play clock starts with the run's first reading
            if self._ff_target is not None:
                if t < self._ff_target:
                    return  # fast-forward: no pacing
                self._anchor(self._ff_target)
                self._ff_target = None
        while not self._should_stop():
            if self._ff_target is not None:
                return  # a forward seek came in: fast-forward from here
            if self.speed is None:
                return
            wait = t - self.position()
            if wait <= 0:
                return
            self._wake.wait(min(0.05, wait / self.speed) if not self.paused else 0.2)
            self._wake.clear()
