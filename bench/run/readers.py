"""Reader threads: one per instrument, each turning reads into `Block`s on a bounded queue.

A reader never waits for the consumer: when the queue is full the block is dropped, counted,
and the count is reported (the consumer stores it as a ``drop`` event and the snapshot shows
it). A failed exchange is reported as a `CommStatus` item, so the guard sees a failing
instrument as soon as the consumer does. Every blocking read has a timeout (the driver's), and
every loop checks its stop flag, so the threads end promptly when asked.
"""

from __future__ import annotations

import logging
import math
import queue
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from bench.records import (
    INTERLOCK,
    MOUNT_TEMP,
    PUMP_CURRENT,
    PUMP_ON,
    PUMP_SETPOINT,
    SAMPLE_TEMP,
    Block,
)
from bench.safety.pump_port import PumpAccess

log = logging.getLogger(__name__)

PUMP_CHANNELS = (PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON, MOUNT_TEMP, INTERLOCK)
SAMPLE_TEMP_PERIOD = 0.2


@dataclass(frozen=True)
class CommStatus:
    """The outcome of one exchange with an instrument (only failures and recoveries are sent)."""

    source: str
    ok: bool
    t: float
    detail: str = ""
    lost: bool = False


class RunClock:
    """Seconds since the run started, on the monotonic clock, times ``speed``.

    ``speed`` is 1 on a real bench; on an accelerated simulated bench it is the simulation's
    speed-up, so that polled readings and digitiser sample times share one time axis.
    """

    def __init__(self, speed: float = 1.0, start: float | None = None):
        if not speed > 0:
            raise ValueError(f"speed: {speed} is not positive")
        self.speed = float(speed)
        self.start = time.monotonic() if start is None else start

    def now(self) -> float:
        return (time.monotonic() - self.start) * self.speed


class DropCounter:
    """Blocks dropped because the queue was full, per source (thread-safe)."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._counts: dict[str, int] = {}
        self._samples: dict[str, int] = {}

    def add(self, source: str, samples: int) -> None:
        with self._lock:
            self._counts[source] = self._counts.get(source, 0) + 1
            self._samples[source] = self._samples.get(source, 0) + samples

    def totals(self) -> tuple[dict[str, int], dict[str, int]]:
        with self._lock:
            return dict(self._counts), dict(self._samples)


def instrument_clock_zero(clock: RunClock, instrument, what: str, otherwise: str) -> float:
    """Run-clock time at which ``instrument``'s own clock read zero: the midpoint of one clock
    exchange minus its reading, so a slow reply costs half its round trip in accuracy, not all
    of it. Without a clock query the run clock's time now, logged with ``otherwise`` (what the
    times are then counted from)."""
    fallback = clock.now()
    try:
        t1 = clock.now()
        counted = instrument.clock()  # simulated or real seconds since start = run-clock seconds
        t2 = clock.now()
    except Exception as exc:  # no clock query in this profile
        log.info("%s clock not read (%s); %s", what, exc, otherwise)
        return fallback
    return 0.5 * (t1 + t2) - counted


class Reader(threading.Thread):
    """Base reader: calls `read_once` until stopped, putting what it returns on the queue."""

    source = "instrument"

    def __init__(self, out: queue.Queue, clock: RunClock, drops: DropCounter, stop: threading.Event):
        super().__init__(name=f"reader-{self.source}", daemon=True)
        self.out = out
        self.clock = clock
        self.drops = drops
        self.stop_flag = stop
        self.failures = 0
        self.seq = 0
        self.reads = 0
        self.error: BaseException | None = None
        #: Called in this thread with each block and failure report before it is queued: the
        #: guard's checks, which must not wait behind storage or a backlog.
        self.on_block: Callable[[Block], None] | None = None
        self.on_comm: Callable[[CommStatus], None] | None = None

    def read_once(self) -> Block | None:  # pragma: no cover - overridden
        raise NotImplementedError

    def idle_wait(self) -> float:
        """Seconds to wait when a read returned nothing."""
        return 0.002

    def pause_after(self, block: Block) -> float:
        """Seconds to wait after a read that returned ``block`` (none by default)."""
        return 0.0

    def _check(self, item: object) -> None:
        try:
            if isinstance(item, Block) and self.on_block is not None:
                self.on_block(item)
            elif isinstance(item, CommStatus) and self.on_comm is not None:
                self.on_comm(item)
        except Exception:  # the guard logs and trips itself; reading goes on
            log.exception("%s: guard check failed", self.source)

    def put(self, item: object, samples: int = 0) -> None:
        self._check(item)
        try:
            self.out.put_nowait(item)
        except queue.Full:
            if isinstance(item, CommStatus):  # never lose a failure report: wait briefly
                try:
                    self.out.put(item, timeout=0.2)
                    return
                except queue.Full:
                    pass
            self.drops.add(self.source, samples)

    def run(self) -> None:
        from drivers.errors import InstrumentError

        while not self.stop_flag.is_set():
            try:
                block = self.read_once()
            except InstrumentError as exc:
                self.failures += 1
                lost = type(exc).__name__ == "ConnectionLost"
                self.put(CommStatus(self.source, False, self.clock.now(), str(exc), lost=lost))
                log.warning("%s: %s", self.source, exc)
                self.stop_flag.wait(min(0.05 * self.failures, 0.5))
                self.reconnect()
                continue
            except Exception as exc:  # a bug or an unexpected library error: report and stop reading
                self.error = exc
                self.put(
                    CommStatus(self.source, False, self.clock.now(), f"reader stopped: {exc!r}", lost=True)
                )
                log.exception("%s reader stopped", self.source)
                return
            if self.failures:
                self.failures = 0
                self.put(CommStatus(self.source, True, self.clock.now(), "recovered"))
            if block is None:
                self.stop_flag.wait(self.idle_wait())
                continue
            self.reads += 1
            self.put(block, samples=block.n)
            pause = self.pause_after(block)
            if pause > 0:
                self.stop_flag.wait(pause)

    def reconnect(self) -> None:
        """Try to reopen the connection; the next read tells whether it worked."""


class DetectorReader(Reader):
    """Fetches sample sets from the digitiser; block times come from the sample index."""

    source = "detector"

    def __init__(self, digitiser, out, clock, drops, stop, *, max_sets: int = 65536, min_block: float = 0.0):
        super().__init__(out, clock, drops, stop)
        self.digitiser = digitiser
        self.max_sets = int(max_sets)
        if not (math.isfinite(min_block) and min_block >= 0):
            raise ValueError(f"min_block: {min_block!r} is not a time >= 0 s")
        #: Run-clock s of data a block should span at least: after a shorter block the reader
        #: waits for the rest to accumulate (fewer, larger blocks cost less per sample).
        self.min_block = float(min_block)
        self.rate = float(digitiser.rate_hz)
        self.channels = tuple(digitiser.channel_names)
        self.t_start = 0.0
        self.next_index = 0
        self.lost_reported = 0

    def start_acquisition(self) -> None:
        """Start the digitiser and find where its sample 0 lies on the run clock.

        The instrument's acquisition clock is read once, and the run-clock time of its sample
        0 taken as the midpoint of that exchange minus the reading: a slow reply then costs
        half its round trip in accuracy, not all of it. Without a clock query, the time the
        start command returned is used.
        """
        self.digitiser.start()
        self.t_start = instrument_clock_zero(
            self.clock, self.digitiser, "digitiser", "sample times from the start command"
        )
        self.next_index = 0

    def read_once(self) -> Block | None:
        result = self.digitiser.fetch(self.max_sets)
        if result.lost > self.lost_reported:
            self.put(
                CommStatus(
                    self.source,
                    True,
                    self.clock.now(),
                    f"instrument buffer overflow: {result.lost - self.lost_reported} sample sets lost",
                )
            )
            self.lost_reported = result.lost
        if result.data.shape[0] == 0:
            return None
        block = Block(
            source=self.source,
            seq=self.seq,
            t0=self.t_start + result.first_index / self.rate,
            dt=1.0 / self.rate,
            first_index=int(result.first_index),
            channels=self.channels,
            data=result.data,
        )
        self.seq += 1
        self.next_index = result.first_index + result.data.shape[0]
        return block

    def idle_wait(self) -> float:
        # Nothing was waiting: ask again soon (short blocks keep trip latency low).
        return 0.002

    def pause_after(self, block: Block) -> float:
        if block.n >= self.max_sets:  # a full fetch: more is waiting
            return 0.0
        return max(0.0, self.min_block - block.n / self.rate) / self.clock.speed

    def reconnect(self) -> None:
        try:
            self.digitiser.session.reconnect()
        except Exception as exc:  # the next read reports the failure
            log.info("detector reconnect failed: %s", exc)


#: The channel of a polled detector block holding the reading's request-to-reply time (s).
READ_SPREAD = "read_spread"


class MeterReader(Reader):
    """Polls a meter at its poll rate: each reading is a one-sample block at its own time.

    A block's ``t0`` is the midpoint of the request and the reply on the run clock (``dt`` 0,
    so no sample grid is made up); its ``first_index`` numbers the requests, so a request that
    got no reading (a timeout, a garbled reply) shows as a gap in the indices, never as a
    repeated value. The request-to-reply time is kept with every reading, as the channel
    `READ_SPREAD` (s): the timing uncertainty of the sample time is half of it.
    """

    source = "detector"

    def __init__(self, meter, out, clock, drops, stop):
        super().__init__(out, clock, drops, stop)
        self.meter = meter
        #: Real s between the starts of two requests (the poll rate is in run-clock time).
        self.period = float(meter.period_s) / clock.speed
        self.channels = (*meter.channel_names, READ_SPREAD)
        self.t_start = 0.0
        self.requests = 0
        self._next = time.monotonic()

    def start_acquisition(self) -> None:
        """Find where the meter's clock's zero lies on the run clock (for the simulator's truth
        rows), as the digitiser reader does; without a clock query, the run's start."""
        self.t_start = instrument_clock_zero(
            self.clock, self.meter, "meter", "truth times from the run start"
        )
        self._next = time.monotonic()

    def read_once(self) -> Block | None:
        now = time.monotonic()
        if now < self._next:
            self.stop_flag.wait(self._next - now)
            if self.stop_flag.is_set():
                return None
        # a late request does not bring the next one forward: the rate is never exceeded
        self._next = max(self._next + self.period, time.monotonic())
        index = self.requests
        self.requests += 1  # counted before the exchange: a failed one leaves a gap
        reading = self.meter.read(self.clock.now)
        row = np.append(reading.values, reading.spread)[None, :]
        block = Block(self.source, self.seq, reading.t, 0.0, index, self.channels, row)
        self.seq += 1
        return block

    def idle_wait(self) -> float:
        return 0.0

    def reconnect(self) -> None:
        try:
            self.meter.session.reconnect()
        except Exception as exc:
            log.info("meter reconnect failed: %s", exc)


class PumpReader(Reader):
    """Polls the pump driver: current, setpoint, output, mount temperature, interlock."""

    source = "pump"

    def __init__(
        self, pump, out, clock, drops, stop, *, period: float = 0.02, access: PumpAccess | None = None
    ):
        super().__init__(out, clock, drops, stop)
        self.pump = pump
        self.period = float(period)
        self.access = access or PumpAccess()
        self._next = time.monotonic()
        #: The sample temperature, where the driver reads one: a slow quantity, asked at most
        #: every `SAMPLE_TEMP_PERIOD` s so that the safety readings keep their pace (NaN between).
        self.channels = PUMP_CHANNELS + (
            (SAMPLE_TEMP,) if getattr(pump, "reads_sample_temperature", False) else ()
        )
        self._next_temperature = 0.0

    def read_once(self) -> Block | None:
        now = time.monotonic()
        if now < self._next:
            self.stop_flag.wait(self._next - now)
            if self.stop_flag.is_set():
                return None
        self._next = max(self._next + self.period, time.monotonic())
        self.access.wait_for_turn()  # the guard's commands go first
        t = self.clock.now()  # stamped before the query: latencies count from here
        status = self.pump.read_status()
        values = {
            INTERLOCK: status["interlock"],
            PUMP_ON: status["output_state"],
            PUMP_CURRENT: status["measured_current"],
            PUMP_SETPOINT: status["current_setpoint"],
            MOUNT_TEMP: status["mount_temperature"],
        }
        row = [
            (1.0 if values[c] else 0.0) if isinstance(values[c], bool) else float(values[c])
            for c in PUMP_CHANNELS
        ]
        if len(self.channels) > len(PUMP_CHANNELS):
            temperature = math.nan
            if time.monotonic() >= self._next_temperature:
                self._next_temperature = time.monotonic() + SAMPLE_TEMP_PERIOD
                temperature = float(self.pump.sample_temperature())
            row.append(temperature)
        block = Block(self.source, self.seq, t, 0.0, -1, self.channels, np.array([row], dtype=np.float64))
        self.seq += 1
        return block

    def idle_wait(self) -> float:
        return 0.0

    def reconnect(self) -> None:
        try:
            self.pump.session.reconnect()
        except Exception as exc:
            log.info("pump reconnect failed: %s", exc)


def stop_readers(
    readers: list[Reader],
    stop: threading.Event,
    timeout: float = 5.0,
    on_stuck: Callable[[Reader], None] | None = None,
) -> None:
    stop.set()
    deadline = time.monotonic() + timeout
    for r in readers:
        r.join(max(0.0, deadline - time.monotonic()))
        if r.is_alive() and on_stuck:
            on_stuck(r)
