"""The record of one trip condition, and what its check and its clear rule are given.

A `Condition` says, for one condition: its name, which feed of `bench.safety.trip_monitor.
TripMonitor` judges it and on which channels or readings, its ``check`` (the reading ->
a `TripCondition`, None when the reading shows it does not hold, or `UNJUDGED` when the reading
cannot tell), its ``still_holds`` (the clear rule used when a trip is acknowledged), the
bench-file keys whose limits it uses and a summary in plain words. The records themselves, one
table, are in `bench.safety.conditions`.

Kinds:

- `LEVEL`: a state that holds while readings show it. The monitor reports it once when it
  starts to hold, lists it in ``active_conditions`` while it holds, and forgets it when a
  check returns None.
- `EVENT`: something that happened (a jump, an error entry). Reported every time a check finds
  it; never listed as active; the person acknowledging confirms it was looked into.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from bench.config import GuardConfig
from bench.records import Block

#: Feeds of the monitor, i.e. what a check is given.
PUMP_FEED = "pump"  # a pump block (`BlockReading`), from `TripMonitor.feed_pump`
DETECTOR_FEED = "detector"  # a detector block (`BlockReading`), from `TripMonitor.feed_detector`
EXCHANGE_FEED = "exchange"  # one exchange with an instrument (`ExchangeReading`), `comm_result`
AGE_FEED = "age"  # the age of a source's newest reading (`AgeReading`), `check_stale`
ERROR_QUEUE_FEED = "error_queue"  # an instrument's error-queue entries (`ErrorQueueReading`)
POWER_FEED = "power"  # the calibrated pump power against a measured one (`PowerReading`)
GUARD_FEED = "guard"  # raised by the guard itself or by a person: no check, only a clear rule
FEEDS = (PUMP_FEED, DETECTOR_FEED, EXCHANGE_FEED, AGE_FEED, ERROR_QUEUE_FEED, POWER_FEED, GUARD_FEED)

LEVEL = "level"
EVENT = "event"

#: Source names the monitor tracks (a trip's ``source``; stale readings are judged per source).
PUMP = "pump"
DETECTOR = "detector"


class _Unjudged:
    """The reading cannot tell (a channel missing, nothing settled yet): keep the state as it is."""

    _instance: _Unjudged | None = None

    def __new__(cls) -> _Unjudged:
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return "UNJUDGED"


UNJUDGED = _Unjudged()


@dataclass(frozen=True)
class TripCondition:
    """One failed check: what, why, when (run-clock time of the reading that showed it), where."""

    condition: str
    reason: str
    seen_at: float
    source: str


Verdict = TripCondition | None | _Unjudged


# --------------------------------------------------------------------------------------------
# What the checks are given


class BlockReading:
    """One pump or detector block as a check sees it, with what the monitor knows around it.

    Attributes
    ----------
    block : Block
    t : ndarray
        The samples' run-clock times.
    cfg : GuardConfig
    monitor : TripMonitor
        For conditions that need the monitor's state between blocks (its settle time, output
        grace, transmission windows).
    output_off_since, output_on_since : float or None
        When the guard last commanded the output off / on (None while it is the other way).
    settled : ndarray of bool or None
        Pump feed: which samples are settled after the latest change of the current target
        (None without the current, setpoint and output channels).
    ranges : mapping
        Detector feed: full scale (V) of each detector channel present.
    pump_steady : bool
        Detector feed: False while the pump is changed or modulated on purpose.
    found : sequence of TripCondition
        What the checks before this one found in the same block (table order).
    active : mapping
        Conditions holding before this block.
    """

    __slots__ = (
        "block",
        "t",
        "cfg",
        "monitor",
        "output_off_since",
        "output_on_since",
        "settled",
        "ranges",
        "pump_steady",
        "found",
        "active",
        "_watched",
        "_name",
    )

    def __init__(
        self,
        block: Block,
        t: np.ndarray,
        cfg: GuardConfig,
        monitor: Any,
        *,
        output_off_since: float | None = None,
        output_on_since: float | None = None,
        settled: np.ndarray | None = None,
        ranges: Mapping[str, float] | None = None,
        pump_steady: bool = True,
        found: Sequence[TripCondition] = (),
        active: Mapping[str, TripCondition] | None = None,
    ) -> None:
        self.block = block
        self.t = t
        self.cfg = cfg
        self.monitor = monitor
        self.output_off_since = output_off_since
        self.output_on_since = output_on_since
        self.settled = settled
        self.ranges = ranges or {}
        self.pump_steady = pump_steady
        self.found = found
        self.active = active or {}
        self._watched: tuple[str, ...] | None = None
        self._name = ""

    def watched_by(self, condition: Condition) -> BlockReading:
        """This reading, restricted to the channels ``condition`` says it watches (for its check)."""
        self._watched = condition.watches
        self._name = condition.name
        return self

    def _allowed(self, channel: str) -> None:
        if self._watched is not None and channel not in self._watched:
            raise ValueError(
                f"condition {self._name!r}: reads channel {channel!r}, which its record does not "
                f"list in watches {self._watched}"
            )

    def has(self, *channels: str) -> bool:
        """The block carries every one of ``channels``."""
        for c in channels:
            self._allowed(c)
        return all(c in self.block.channels for c in channels)

    def column(self, channel: str) -> np.ndarray:
        self._allowed(channel)
        return self.block.column(channel)

    def columns(self, channels: Sequence[str]) -> dict[str, np.ndarray]:
        """The columns of those of ``channels`` that the block carries, in that order."""
        return {c: self.column(c) for c in channels if c in self.block.channels}


@dataclass(frozen=True)
class ExchangeReading:
    """One failed exchange with ``source`` (``failures`` in a row so far), or a lost connection;
    ``ok`` for a successful one (which clears)."""

    source: str
    ok: bool
    failures: int
    t: float
    detail: str
    lost: bool
    cfg: GuardConfig


@dataclass(frozen=True)
class AgeReading:
    """``source``'s newest reading is from ``newest``; it is ``now``."""

    source: str
    now: float
    newest: float
    cfg: GuardConfig


@dataclass(frozen=True)
class ErrorQueueReading:
    """Entries ``(code, text)`` read from ``source``'s error queue at run-clock time ``t``."""

    source: str
    entries: Sequence[tuple[int, str]]
    t: float


@dataclass(frozen=True)
class PowerReading:
    """The bench file's pump power at ``current_a`` (``expected_w``) and a measured one; ``what``
    names the measurement."""

    expected_w: float
    measured_w: float
    current_a: float
    what: str
    t: float


# --------------------------------------------------------------------------------------------
# What the clear rules are given


@dataclass(frozen=True)
class Latest:
    """The newest readings the monitor has seen (a snapshot).

    Attributes
    ----------
    values : mapping
        Pump channel -> (run-clock time, newest value).
    peaks : mapping
        Detector channel -> (time of the newest block's last sample, largest ``|V|`` in that
        block, full scale V).
    reading_times : mapping
        Source -> time of its newest sample.
    comm_failures : mapping
        Source -> consecutive failed exchanges.
    comm_ok_at : mapping
        Source -> time of its newest successful exchange.
    active : mapping
        Condition -> the `TripCondition`, for conditions that currently hold.
    """

    values: Mapping[str, tuple[float, float]]
    peaks: Mapping[str, tuple[float, float, float]]
    reading_times: Mapping[str, float]
    comm_failures: Mapping[str, int]
    comm_ok_at: Mapping[str, float]
    active: Mapping[str, TripCondition]


@dataclass(frozen=True)
class Evidence:
    """What a clear rule judges on: the newest readings, the limits, now, and the trip's time.

    A reading counts only if taken after ``since`` (the trip's ``seen_at``) and not older than
    ``cfg.stale_after``. ``source`` is set for conditions named per source (``stale.pump``).
    """

    latest: Latest
    cfg: GuardConfig
    now: float
    since: float | None
    source: str = ""

    def fresh(self, t: float | None, what: str) -> str | None:
        """None if a reading at ``t`` counts; otherwise why it does not."""
        if t is None:
            return f"no {what} reading yet"
        if self.since is not None and not t > self.since:
            return f"no {what} reading since the trip (t={self.since:.3f} s)"
        if self.now - t > self.cfg.stale_after:
            return f"the newest {what} reading is {self.now - t:.2f} s old"
        return None

    def value(self, channel: str) -> tuple[float | None, str | None]:
        """(newest value of a pump channel, None), or (None, why it does not count)."""
        entry = self.latest.values.get(channel)
        why = self.fresh(entry[0] if entry else None, channel)
        return (None, why) if why else (entry[1], None)  # type: ignore[index]


def cleared_by_acknowledgement(e: Evidence) -> str | None:
    """Clear rule of an event, or of a state the trip itself ended: the person acknowledging
    confirms it was looked into."""
    return None


def nothing_to_read(pump: Any) -> str | None:
    """Clear rule without a monitor, for conditions that need no reading (cleared by acknowledging)."""
    return None


# --------------------------------------------------------------------------------------------
# The record


@dataclass(frozen=True)
class Condition:
    """One trip condition: its trip rule and its clear rule, and where they come from.

    Attributes
    ----------
    name : str
        The condition's name in trips, events and run files; for a condition named per source,
        the prefix (``"stale."``: ``"stale.pump"``, ``"stale.detector"``), with ``per_source``.
    feed : str
        Which feed judges it (one of `FEEDS`): what ``check`` is given.
    watches : tuple of str
        The channels (block feeds) or readings it judges; a check reading another channel of a
        block raises.
    check : callable or None
        reading -> `TripCondition`, None (does not hold) or `UNJUDGED`. None for `GUARD_FEED`.
    still_holds : callable
        `Evidence` -> why it still holds, or None once fresh readings show it cleared.
    keys : tuple of str
        Bench-file keys whose values it uses (``guard.max_current``).
    summary : str
        The trip and clear rule in plain words, for people.
    kind : str
        `LEVEL` or `EVENT` (see the module notes).
    per_source : bool
        ``name`` is a prefix completed by the source's name.
    holds_on_driver : callable or None
        Without a monitor, the guard's clear rule read from the pump driver (driver -> why it
        still holds, or None); None: such a guard cannot judge it.
    """

    name: str
    feed: str
    watches: tuple[str, ...]
    check: Callable[[Any], Verdict] | None
    still_holds: Callable[[Evidence], str | None]
    keys: tuple[str, ...] = ()
    summary: str = ""
    kind: str = LEVEL
    per_source: bool = False
    holds_on_driver: Callable[[Any], str | None] | None = field(default=None, compare=False)

    def __post_init__(self) -> None:
        where = f"condition {self.name!r}"
        if not isinstance(self.name, str) or not self.name.strip():
            raise ValueError(f"condition name: expected a non-empty name, got {self.name!r}")
        if self.feed not in FEEDS:
            raise ValueError(f"{where}: feed {self.feed!r} is not one of {', '.join(FEEDS)}")
        if self.kind not in (LEVEL, EVENT):
            raise ValueError(f"{where}: kind {self.kind!r} is not {LEVEL!r} or {EVENT!r}")
        if (self.check is None) != (self.feed == GUARD_FEED):
            raise ValueError(f"{where}: expected a check exactly when the feed is not {GUARD_FEED!r}")
        if not callable(self.still_holds):
            raise ValueError(f"{where}: still_holds: expected a callable taking Evidence")
        if self.per_source and not self.name.endswith("."):
            raise ValueError(f"{where}: a per-source name is a prefix ending in '.'")
        if not isinstance(self.watches, tuple) or not isinstance(self.keys, tuple):
            raise ValueError(f"{where}: watches and keys: expected tuples of names")

    def name_for(self, source: str) -> str:
        """The name of this condition for ``source`` (the name itself unless per source)."""
        return self.name + source if self.per_source else self.name

    def names(self, condition: str) -> str | None:
        """The source if ``condition`` is this condition's name ("" when not per source), else None."""
        if self.per_source:
            return condition[len(self.name) :] if condition.startswith(self.name) else None
        return "" if condition == self.name else None


# --------------------------------------------------------------------------------------------
# Small helpers the checks share


def as_samples(values: object, name: str) -> np.ndarray:
    """``values`` as a 1-D float array; ValueError naming ``name`` otherwise."""
    a = np.asarray(values, dtype=np.float64)
    if a.ndim != 1:
        raise ValueError(f"{name}: expected a 1-D array of samples, got shape {a.shape}")
    return a


def sample_times(times: object, n: int) -> np.ndarray:
    """``times`` as a 1-D array of ``n`` times; ValueError otherwise."""
    t = as_samples(times, "times")
    if t.shape[0] != n:
        raise ValueError(f"times: {t.shape[0]} times for {n} samples")
    return t


def first(bad: np.ndarray) -> int | None:
    """Index of the first True, or None."""
    return int(np.argmax(bad)) if bad.any() else None


def celsius(kelvin: float) -> str:
    return f"{kelvin:.2f} K ({kelvin - 273.15:.2f} degC)"


def reads_exactly(value: object, state: bool) -> bool:
    """A driver's boolean reply is exactly ``state`` (True/False or 1/0; anything else is not)."""
    if isinstance(value, (bool, int, float, np.bool_, np.integer, np.floating)):
        return bool(value == state)
    return False
