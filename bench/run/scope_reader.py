"""The triggered scope's reader thread: one acquisition (one shot) per block.

Each read arms the scope, waits for it to report the acquisition complete and fetches every
channel (`drivers.instruments.scope.Scope.acquire`). The block holds the record's samples on
their own grid (``dt`` the scope's x increment) with one more channel, `TRIGGER_TIME`: each
sample's time from the trigger (s, negative before it), as the scope's scaling gives it. The
pump pulse's rising edge is the trigger, so a mode can tell the part before the pulse from the
rest without looking at the pump monitor.

Times. The trigger fell between the host clock's readings at the arm and at complete; the
record ends shortly before complete. A block's ``t0`` is ``t_complete - (time of its last
sample from the trigger)``, moved later when needed so that blocks never overlap (the
estimator's sample grid only goes forward). The run-clock time of a shot is good to the
polling of ``complete`` (10 ms); the times within a shot are the scope's own.

Shots are numbered from 0: ``first_index`` is the shot's number times the record length, so
the records of successive shots follow each other on the sample index and a missed shot (no
trigger within the driver's ``completion_timeout``, or a failed read) leaves a gap of one
record, which the consumer logs as a ``gap`` event.
"""

from __future__ import annotations

import logging
import math

import numpy as np

from bench.records import TRIGGER_TIME, Block
from bench.run.readers import CommStatus, Reader, instrument_clock_zero

log = logging.getLogger(__name__)

__all__ = ["TRIGGER_TIME", "ScopeReader"]


class ScopeReader(Reader):
    """Arms, waits for and reads a triggered scope, one block per shot (see the module doc)."""

    source = "detector"

    def __init__(self, scope, out, clock, drops, stop):
        super().__init__(out, clock, drops, stop)
        self.scope = scope
        self.channels = (*scope.channel_names, TRIGGER_TIME)
        self.t_start = 0.0
        self.shots = 0  # shots asked for so far (a missed one is counted too)
        self.missed = 0
        self.record_n: int | None = None
        self._last_end = -math.inf

    def start_acquisition(self) -> None:
        """Find where the scope's clock's zero lies on the run clock (for the simulator's truth
        rows), as the other readers do; without a clock query, the run's start."""
        self.t_start = instrument_clock_zero(
            self.clock, self.scope, "scope", "truth times from the run start"
        )

    def read_once(self) -> Block | None:
        from drivers.errors import InstrumentTimeout, ReplyError

        shot = self.shots
        self.shots += 1  # counted before the exchange: a missed shot leaves a gap
        t_arm = self.clock.now()
        self.scope.arm()
        try:
            t_complete = self.scope.wait_complete(clock=self.clock.now)
        except InstrumentTimeout as exc:
            self.missed += 1
            self.put(CommStatus(self.source, True, self.clock.now(), f"shot {shot} missed: {exc}"))
            return None
        waveforms = self.scope.fetch()
        first = waveforms[0]
        for w in waveforms[1:]:
            if (
                w.n != first.n
                or abs(w.dx - first.dx) > 1e-9 * first.dx
                or abs(w.x0 - first.x0) > 1e-9 * first.dx
            ):
                raise ReplyError(
                    f"shot {shot}: channel {w.name} has {w.n} samples from {w.x0:g} s every {w.dx:g} s, "
                    f"channel {first.name} {first.n} from {first.x0:g} s every {first.dx:g} s: "
                    "the channels of one acquisition must share their time axis",
                    role="detector",
                )
        if self.record_n is None:
            self.record_n = first.n
        times = first.times
        t0 = t_complete - float(times[-1])
        t0 = max(t0, t_arm + float(times[0]), self._last_end + 2.0 * first.dx)
        self._last_end = t0 + first.dx * (first.n - 1)
        data = np.column_stack([w.volts for w in waveforms] + [times])
        block = Block(self.source, self.seq, t0, first.dx, shot * self.record_n, self.channels, data)
        self.seq += 1
        return block

    def idle_wait(self) -> float:
        return 0.0

    def reconnect(self) -> None:
        try:
            self.scope.session.reconnect()
        except Exception as exc:
            log.info("scope reconnect failed: %s", exc)
