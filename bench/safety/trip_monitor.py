"""TripMonitor: feeds readings to the trip conditions' checks and keeps what they need.

Every feed (`TripMonitor.feed_pump`, `feed_detector`, `comm_result`, `check_stale`,
`feed_error_queue`, `feed_power`) keeps its little bookkeeping (newest reading times and values,
consecutive communication failures, when the current target last changed, when the pump
changed on purpose), then loops over the one table of conditions (`bench.safety.conditions.
CONDITIONS`) in table order and judges each record of its feed. A `LEVEL` condition is reported
once when it starts to hold and listed in `active_conditions` while it holds; an `EVENT` is
reported each time it is found. `TripMonitor.why_still_holds` answers for acknowledging a trip.

A second safety layer only: it never replaces the hardware interlock, the laser safety officer,
ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

import math
import threading
from collections import deque
from collections.abc import Mapping, Sequence
from types import MappingProxyType

import numpy as np

from bench.config import GuardConfig
from bench.records import PUMP_CURRENT, PUMP_ON, PUMP_SETPOINT, Block
from bench.safety.condition_record import (
    AGE_FEED,
    DETECTOR,
    DETECTOR_FEED,
    ERROR_QUEUE_FEED,
    EXCHANGE_FEED,
    LEVEL,
    POWER_FEED,
    PUMP,
    PUMP_FEED,
    UNJUDGED,
    AgeReading,
    BlockReading,
    ErrorQueueReading,
    ExchangeReading,
    Latest,
    PowerReading,
    TripCondition,
)
from bench.safety.condition_record import as_samples as _array
from bench.safety.condition_record import sample_times as _times
from bench.safety.conditions import DETECTOR_CHANNELS, conditions_on, stale_condition, why_still_holds
from bench.safety.transmission_windows import TransmissionWindows

#: How long one poll of the pump driver may take (s): readings stamped this long before a
#: commanded change may already show part of it.
POLL_SPAN = 0.1

#: Defaults of `TripMonitor` (common practice, no source).
DEFAULT_SETTLE_TIME = 0.2  # s after a setpoint or output change before "not following" counts
DEFAULT_JUMP_WINDOW = 0.01  # s, length of the windows compared for a transmission jump
DEFAULT_MIN_REFERENCE = 0.02  # fraction of full scale below which S is not computed
DEFAULT_PUMP_STEADY = 0.05  # relative change of the pump monitor that counts as a pump change

#: Times closer than this are equal (float rounding of sample times), s.
_TIME_SLACK = 1e-9


def settled_mask(
    times: object,
    target: object,
    settle_time: float,
    last_target: float | None,
    last_change: float,
) -> tuple[np.ndarray, float, float]:
    """Which samples are at least ``settle_time`` after the latest change of ``target``.

    State in, state out: ``last_target`` and ``last_change`` describe the stream before this
    block (None and ``-inf`` at the start; the first sample then counts as a change). Returns
    ``(mask, new_last_target, new_last_change)``. Times within 1 ns count as equal.
    """
    x = _array(target, "target")
    t = _times(times, x.shape[0])
    if not (math.isfinite(settle_time) and settle_time >= 0):
        raise ValueError(f"settle_time: expected a time >= 0 s, got {settle_time!r}")
    if x.shape[0] == 0:
        return np.zeros(0, dtype=bool), last_target, last_change  # type: ignore[return-value]
    changed = np.empty(x.shape[0], dtype=bool)
    changed[0] = last_target is None or x[0] != last_target
    changed[1:] = ~(x[1:] == x[:-1])
    change_t = np.where(changed, t, -np.inf)
    latest_change = np.maximum(np.maximum.accumulate(change_t), last_change)
    mask = (t - latest_change) >= settle_time - _TIME_SLACK
    return mask, float(x[-1]), float(latest_change[-1])


class TripMonitor:
    """Feeds blocks and communication results to the checks and keeps what they need.

    Each ``feed_*`` returns the conditions that *started* to hold with that input (a condition
    that keeps holding is reported once; it is reported again after it clears and returns).
    `active_conditions` lists those holding now. Thread-safe: the pipeline feeds it while a UI
    thread may ask `why_still_holds`.

    Parameters
    ----------
    cfg : GuardConfig
        Limits from the bench file.
    settle_time : float
        s after a change of the current target (setpoint or output state) before the current
        must follow it; also how long S is not compared after the pump changed.
    jump_window : float
        s, length of the windows whose mean S is compared for a transmission jump.
    min_reference_fraction : float
        S is not computed from windows whose reference is below this fraction of full scale
        (probe blocked, dark being taken).
    pump_steady_fraction : float
        A relative change of the pump-monitor channel between two windows above this counts as
        a pump change (the pair is not compared).
    started_at : float or None
        Run-clock time acquisition started; readings are expected from then on (stale checks
        wait for the first reading when None).
    sources : sequence of str
        Sources checked for stale readings.
    output_grace : float or None
        s after the output was commanded off before a reading that shows it on trips
        (``settle_time`` plus ``lag_allowance`` when None).
    lag_allowance : float
        Run-clock s by which a command may reach the instrument late, or a reading's time stamp
        may be off from the guard's clock (one pump poll, `POLL_SPAN`, by default). Readings
        this close to a commanded change are not judged against it. On an accelerated
        simulated bench the caller scales it by the speed: a few milliseconds of transport
        delay are then seconds of run-clock time.
    """

    def __init__(
        self,
        cfg: GuardConfig,
        *,
        settle_time: float = DEFAULT_SETTLE_TIME,
        jump_window: float = DEFAULT_JUMP_WINDOW,
        min_reference_fraction: float = DEFAULT_MIN_REFERENCE,
        pump_steady_fraction: float = DEFAULT_PUMP_STEADY,
        started_at: float | None = None,
        sources: Sequence[str] = (PUMP, DETECTOR),
        output_grace: float | None = None,
        lag_allowance: float = POLL_SPAN,
    ) -> None:
        if not isinstance(cfg, GuardConfig):
            raise ValueError(f"cfg: expected a GuardConfig, got {type(cfg).__name__}")
        for name, value in (
            ("settle_time", settle_time),
            ("jump_window", jump_window),
            ("lag_allowance", lag_allowance),
        ):
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise ValueError(f"{name}: expected a time >= 0 s, got {value!r}")
        if jump_window <= 0:
            raise ValueError(f"jump_window: expected a positive time, got {jump_window!r}")
        for name, value in (
            ("min_reference_fraction", min_reference_fraction),
            ("pump_steady_fraction", pump_steady_fraction),
        ):
            if not (isinstance(value, (int, float)) and 0 < value < 1):
                raise ValueError(f"{name}: expected a fraction between 0 and 1, got {value!r}")
        self.cfg = cfg
        self.settle_time = float(settle_time)
        self.jump_window = float(jump_window)
        self.min_reference_fraction = float(min_reference_fraction)
        self.pump_steady_fraction = float(pump_steady_fraction)
        self.started_at = started_at
        self.sources = tuple(sources)
        self.lag_allowance = float(lag_allowance)
        self.output_grace = (
            self.settle_time + self.lag_allowance if output_grace is None else float(output_grace)
        )
        self._lock = threading.Lock()
        self._active: dict[str, TripCondition] = {}
        self._values: dict[str, tuple[float, float]] = {}
        self._peaks: dict[str, tuple[float, float, float]] = {}
        self._reading_times: dict[str, float] = {}
        self._failures: dict[str, int] = {}
        self._comm_ok_at: dict[str, float] = {}
        self._last_target: float | None = None
        self._last_change = -math.inf
        self._pump_changes: deque[float] = deque(maxlen=32)
        self._commanded_changes: deque[float] = deque(maxlen=8)
        self.windows = TransmissionWindows(
            jump_window=self.jump_window,
            min_reference_fraction=self.min_reference_fraction,
            pump_steady_fraction=self.pump_steady_fraction,
            settle_time=self.settle_time,
            lag_allowance=self.lag_allowance,
            pump_changes=self._pump_changes,
        )

    # -- small helpers ---------------------------------------------------------------------
    def _judge(self, feed: str, reading: object, found: list[TripCondition]) -> None:
        """Judge every record of ``feed`` on ``reading``, in table order (call with the lock held)."""
        for record in conditions_on(feed):
            view = reading.watched_by(record) if isinstance(reading, BlockReading) else reading
            verdict = record.check(view)
            if verdict is UNJUDGED:
                continue
            if record.kind == LEVEL:
                self._level(record.name_for(_source(reading)), verdict, found)
            elif verdict is not None:
                found.append(verdict)

    def _level(self, condition: str, result: TripCondition | None, found: list[TripCondition]) -> None:
        if result is None:
            self._active.pop(condition, None)
        elif condition not in self._active:
            self._active[condition] = result
            found.append(result)

    def _seen(self, source: str, t_end: float) -> None:
        self._reading_times[source] = max(t_end, self._reading_times.get(source, -math.inf))
        self._active.pop(stale_condition(source), None)

    def _settled(self, block: Block, t: np.ndarray) -> np.ndarray | None:
        """Which samples are settled after the latest change of the current target (None without
        the current, setpoint and output channels); notes the target's changes as pump changes."""
        if not {PUMP_CURRENT, PUMP_SETPOINT, PUMP_ON} <= set(block.channels):
            return None
        on = block.column(PUMP_ON)
        target = np.where(on >= 0.5, block.column(PUMP_SETPOINT), 0.0)
        before = self._last_change
        mask, self._last_target, self._last_change = settled_mask(
            t, target, self.settle_time, self._last_target, self._last_change
        )
        if self._last_change > before:
            self._pump_changes.append(self._last_change)
        if self._commanded_changes:
            # A reading polled across a commanded change (or within the settle time after it)
            # may mix the values before and after: do not judge it.
            changes = np.fromiter(self._commanded_changes, dtype=np.float64)
            lag = self.lag_allowance
            near = (t[:, None] >= changes[None, :] - lag) & (
                t[:, None] < changes[None, :] + self.settle_time + lag
            )
            mask &= ~near.any(axis=1)
        return mask

    # -- feeding ---------------------------------------------------------------------------
    def feed_pump(
        self,
        block: Block,
        *,
        output_off_since: float | None = None,
        output_on_since: float | None = None,
        received_at: float | None = None,
    ) -> list[TripCondition]:
        """Check one pump block (channels ``pump_current``, ``pump_setpoint``, ``pump_on``,
        ``mount_temp``, ``interlock``; any subset).

        ``output_off_since`` is the run-clock time the guard last commanded the output off
        (None while it is commanded on): a later reading showing it on trips.
        ``output_on_since`` is the time it commanded the output on (None while commanded off):
        a later reading showing it off trips.
        """
        if not isinstance(block, Block):
            raise ValueError(f"block: expected a Block, got {type(block).__name__}")
        found: list[TripCondition] = []
        if block.n == 0:
            return found
        t = block.times()
        with self._lock:
            self._seen(PUMP, block.t_end if received_at is None else max(block.t_end, received_at))
            for name in block.channels:
                self._values[name] = (float(t[-1]), float(block.column(name)[-1]))
            reading = BlockReading(
                block,
                t,
                self.cfg,
                self,
                output_off_since=output_off_since,
                output_on_since=output_on_since,
                settled=self._settled(block, t),
                found=found,
                active=self._active,
            )
            self._judge(PUMP_FEED, reading, found)
        return found

    def feed_detector(
        self,
        block: Block,
        full_scale: float | Mapping[str, float],
        *,
        pump_steady: bool = True,
        received_at: float | None = None,
    ) -> list[TripCondition]:
        """Check one detector block (``probe``, ``reference``, ``pump_monitor`` in V).

        ``full_scale`` is the detector range in V (one for all channels, or per channel;
        ``math.inf`` where none is known: freshness and S are still judged).
        ``pump_steady=False`` says the pump is being changed or modulated on purpose (chopped
        mode, a sweep step): S is then not compared across this block.
        """
        if not isinstance(block, Block):
            raise ValueError(f"block: expected a Block, got {type(block).__name__}")
        present = [c for c in DETECTOR_CHANNELS if c in block.channels]
        ranges = _ranges(full_scale, present)
        found: list[TripCondition] = []
        if block.n == 0:
            return found
        t = block.times()
        with self._lock:
            # fresh = it arrived: a digitiser's data lag behind the clock by its fetch latency
            self._seen(DETECTOR, block.t_end if received_at is None else max(block.t_end, received_at))
            for c in present:
                peak = float(np.max(np.abs(block.column(c))))  # NaN propagates: a NaN reading never clears
                self._peaks[c] = (float(t[-1]), peak, ranges[c])
            reading = BlockReading(
                block,
                t,
                self.cfg,
                self,
                ranges=ranges,
                pump_steady=pump_steady,
                found=found,
                active=self._active,
            )
            self._judge(DETECTOR_FEED, reading, found)
        return found

    def comm_result(
        self, source: str, ok: bool, t: float, detail: str = "", lost: bool = False
    ) -> list[TripCondition]:
        """Record one exchange with ``source`` (``"pump"``, ``"detector"``) at run-clock time ``t``.

        ``lost=True`` (the connection dropped) trips at once; otherwise ``comm_failures``
        consecutive failures trip. A success clears the condition.
        """
        if not isinstance(source, str) or not source:
            raise ValueError(f"source: expected a source name, got {source!r}")
        found: list[TripCondition] = []
        with self._lock:
            if ok and not lost:
                self._failures[source] = 0
                self._comm_ok_at[source] = float(t)
            else:
                self._failures[source] = self._failures.get(source, 0) + 1
            self._judge(
                EXCHANGE_FEED,
                ExchangeReading(
                    source, bool(ok), self._failures[source], float(t), detail, bool(lost), self.cfg
                ),
                found,
            )
        return found

    def check_stale(self, now: float) -> list[TripCondition]:
        """Conditions for sources whose newest reading is older than ``stale_after``."""
        found: list[TripCondition] = []
        with self._lock:
            for source in self.sources:
                newest = self._reading_times.get(source, self.started_at)
                if newest is None:
                    continue
                self._judge(AGE_FEED, AgeReading(source, float(now), newest, self.cfg), found)
        return found

    def feed_error_queue(
        self, source: str, entries: Sequence[tuple[int, str]], t: float
    ) -> list[TripCondition]:
        """Entries ``(code, text)`` read from ``source``'s error queue at run-clock time ``t``."""
        found: list[TripCondition] = []
        with self._lock:
            self._judge(ERROR_QUEUE_FEED, ErrorQueueReading(source, tuple(entries), float(t)), found)
        return found

    def feed_power(
        self, expected_w: float, measured_w: float, current_a: float, what: str, t: float
    ) -> list[TripCondition]:
        """The bench file's pump power at ``current_a`` against one measured by ``what``."""
        found: list[TripCondition] = []
        with self._lock:
            self._judge(POWER_FEED, PowerReading(expected_w, measured_w, current_a, what, float(t)), found)
        return found

    def note_pump_change(self, t: float) -> None:
        """The pump was changed on purpose at run-clock time ``t`` (S jumps are then expected)."""
        with self._lock:
            self._pump_changes.append(float(t))
            self._commanded_changes.append(float(t))

    # -- asking ----------------------------------------------------------------------------
    def active_conditions(self) -> dict[str, TripCondition]:
        """Conditions that hold now, by name."""
        with self._lock:
            return dict(self._active)

    def latest(self) -> Latest:
        """A snapshot of the newest readings."""
        with self._lock:
            return Latest(
                values=MappingProxyType(dict(self._values)),
                peaks=MappingProxyType(dict(self._peaks)),
                reading_times=MappingProxyType(dict(self._reading_times)),
                comm_failures=MappingProxyType(dict(self._failures)),
                comm_ok_at=MappingProxyType(dict(self._comm_ok_at)),
                active=MappingProxyType(dict(self._active)),
            )

    def why_still_holds(self, condition: str, now: float, since: float | None = None) -> str | None:
        """Why ``condition`` still holds, or None once fresh readings show it cleared."""
        return why_still_holds(condition, self.latest(), self.cfg, now, since)

    def condition_cleared(self, condition: str, now: float, since: float | None = None) -> bool:
        return self.why_still_holds(condition, now, since) is None


def _source(reading: object) -> str:
    """The source a per-source condition is named for."""
    return getattr(reading, "source", "")


def _ranges(full_scale: float | Mapping[str, float], channels: Sequence[str]) -> dict[str, float]:
    if isinstance(full_scale, Mapping):
        missing = [c for c in channels if c not in full_scale]
        if missing:
            raise ValueError(f"full_scale: no range given for {', '.join(missing)}")
        ranges = {c: full_scale[c] for c in channels}
    else:
        ranges = {c: full_scale for c in channels}
    for c, fs in ranges.items():
        # math.inf: no range is known (a lock-in's auxiliary inputs), so no full-scale check
        if isinstance(fs, bool) or not isinstance(fs, (int, float)) or not (fs > 0 and not math.isnan(fs)):
            raise ValueError(f"full_scale: expected a positive range in V for {c}, got {fs!r}")
    return {c: float(fs) for c, fs in ranges.items()}
