"""The consumer: raw blocks to disk first, then the guard's checks, then the estimator.

`Consumer.process` takes the items of one ordered stream (blocks from the readers,
communication reports, and `Control` instructions from whoever runs the measurement) and
does, for each block, in this order:

1. append it to the run store (nothing is lost even if what follows fails);
2. feed the estimator (a pure function of state and block) and store its estimates;
3. update the decimated history and the latest readings that `snapshot` hands out.

`Consumer.finish` ends the stream (a sweep's open step is closed there), live and on replay.

The guard's trip checks do not wait for this: they run in the reader threads as each reading
arrives (`bench.run.measurement.Measurement`), so a trip never waits behind storage or a backlog.

A `Control` (capture dark, capture baseline, change mode or setting) is applied between two
blocks and stored as an event that names the detector block it was applied before, so a
replay applies it at exactly the same place and reproduces the estimates. A setting change
waits until the data reach its time (`Consumer.apply`), so a backlog does not move it earlier. The consumer never
waits for a display: `snapshot` copies what it needs under a short lock.
"""

from __future__ import annotations

import dataclasses
import logging
import queue
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np

import bench.estimator as est
from bench.estimator.mode import EMISSION_SETTINGS
from bench.records import PROBE, PUMP_MONITOR, REFERENCE, SAMPLE_TEMP, Block, Estimate, Event
from bench.run.history import EstimateHistory, EstimateView, TraceHistory, TraceView
from bench.run.readers import CommStatus
from bench.safety.guard import EMITTING

log = logging.getLogger(__name__)

#: How much recent detector data the consumer keeps for dark and baseline captures (s).
RECENT_SECONDS = 3.0
#: Span (s) of the newest data averaged for the live levels shown on screen.
LEVELS_SPAN = 1e-3

#: ... and at least this many blocks (on an accelerated bench one block spans many seconds).
RECENT_MIN_BLOCKS = 8

CONTROL_KINDS = ("dark", "baseline", "background", "mode", "setting")


@dataclass(frozen=True)
class Control:
    """An instruction applied between blocks.

    ``dark``, ``baseline`` and ``background`` carry ``t_start``/``t_end`` (run clock): the
    detector samples in that window become the dark, the baseline or the pump-induced
    background (probe blocked, pump on); a ``dark`` may instead carry the levels
    measured apart, ``probe_v`` and ``reference_v`` (V). ``mode`` carries ``mode`` and ``settings``;
    ``setting`` carries the settings that changed (``pump_power``, ``pump_current``,
    ``probe_wavelength``).
    """

    kind: str
    t: float
    data: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}))
    who: str = "gainbench"

    def __post_init__(self) -> None:
        if self.kind not in CONTROL_KINDS:
            raise ValueError(f"kind: {self.kind!r} is not one of {', '.join(CONTROL_KINDS)}")


@dataclass(frozen=True)
class TruthItem:
    """The simulator's true state at run-clock time ``t``."""

    t: float
    values: Mapping[str, float]


@dataclass(frozen=True, eq=False)
class Snapshot:
    """What a display needs, copied at one moment. Never mutated after it is made."""

    t: float  # run clock of the newest block
    mode: str
    estimate: Estimate | None  # latest cumulative estimate
    window: Estimate | None  # latest window estimate
    has_dark: bool
    has_baseline: bool
    pump: Mapping[str, float]  # latest pump reading by channel
    guard_state: str
    trip_reason: str | None
    blocks: int
    samples: int
    drops: int
    dropped_samples: int
    faults: int
    last_fault: str
    trace: TraceView | None
    pump_trace: TraceView | None
    estimates: EstimateView | None
    truth: Mapping[str, float] | None
    events: tuple[Event, ...]
    last_flush_age: float | None
    store_bytes: int | None
    sample_rate: float | None
    extra: Mapping[str, Any]
    #: The newest detector levels (V, and S): means over the last `LEVELS_SPAN` of data.
    levels: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))


class Consumer:
    """Processes one ordered stream of items. Used from one thread; `snapshot` from any."""

    def __init__(
        self,
        params: est.EstimatorParams,
        mode: str,
        settings: Mapping[str, Any] | None = None,
        *,
        store=None,
        guarded_pump=None,
        now: Callable[[], float] | None = None,
        drop_totals: Callable[[], tuple[dict[str, int], dict[str, int]]] | None = None,
        keep_events: int = 200,
        traces: bool = True,
        trace_bucket: float = 0.005,
    ):
        self.params = params
        self.traces = traces  # keep the display's decimated traces (not needed headless)
        self.state = est.new_state(params, mode, settings)
        self.store = store
        self.guarded_pump = guarded_pump
        self.now = now or time.monotonic
        self.drop_totals = drop_totals
        self._lock = threading.Lock()
        self._recent: deque[Block] = deque()
        self._pending: deque[Control] = deque()  # controls waiting for the data to reach them
        self._recent_span = 0.0
        self._next_detector_seq = 0
        #: Sample index the next detector block should start at (a digitiser counts from 0).
        self._next_detector_index = 0
        self.blocks = 0
        self.samples = 0
        self.faults = 0
        self.last_fault = ""
        self._reported_drops = (0, 0)
        self._latest: Estimate | None = None
        self._window: Estimate | None = None
        self._pump: dict[str, float] = {}
        self._levels: dict[str, float] = {}
        self._truth: dict[str, float] | None = None
        self._events: deque[Event] = deque(maxlen=keep_events)
        self.trace = TraceHistory(("probe", "reference", "transmission", "pump_monitor"), bucket=trace_bucket)
        self.pump_trace = TraceHistory(("pump_current", "mount_temp"), bucket=0.05, capacity=2000)
        self.estimate_history = EstimateHistory()
        self.all_estimates_count = 0
        self.unanalysed_blocks = 0
        self._t = 0.0
        self.sample_rate: float | None = None
        self.extra: dict[str, Any] = {}
        self.last_estimates: list[Estimate] = []
        #: When the guard last switched the pump on and off (`EMISSION_SETTINGS`), for a mode
        #: that reads the pump's state from them (lockin: its reference runs while the pump is off).
        self._emission: dict[str, float] = {
            k: float(v) for k in EMISSION_SETTINGS if (v := (settings or {}).get(k)) is not None
        }
        #: (kind, ok, text) of each dark/baseline/mode/setting control, in order applied.
        self.procedure_results: list[tuple[str, bool, str]] = []

    # -- the stream -----------------------------------------------------------------------
    def process(self, item: object) -> None:
        if isinstance(item, Block):
            self._block(item)
        elif isinstance(item, Control):
            self.apply(item)
        elif isinstance(item, CommStatus):
            self._comm(item)
        elif isinstance(item, TruthItem):
            if self.store is not None:
                self.store.append_truth(item.t, dict(item.values))
            with self._lock:
                self._truth = dict(item.values)
        elif isinstance(item, Event):
            self.record_event(item)
            self._follow_emission(item)
        else:
            raise TypeError(f"item: cannot process {type(item).__name__}")

    def _takes_emission(self, mode: str) -> bool:
        return set(EMISSION_SETTINGS) <= set(est.mode_of(mode).settings)

    def _follow_emission(self, event: Event) -> None:
        """A guard transition into or out of emitting becomes an emission setting at its time.

        Stored as a setting control like any other, so replay applies it at the same place.
        """
        if event.kind != "guard" or not isinstance(event.data, Mapping):
            return
        before, after = event.data.get("from"), event.data.get("to")
        if (before == EMITTING) == (after == EMITTING):
            return
        key = "emission_start" if after == EMITTING else "emission_stop"
        self._emission[key] = float(event.t)
        if self._takes_emission(self.state.mode):
            self.apply(Control("setting", float(event.t), {key: float(event.t)}, event.who))

    def store_only(self, item: object) -> None:
        """Like `process`, but a block is only stored (and its index checked), not analysed.

        For closing a run whose analysis has fallen behind: the raw data land in the run file
        and `bench.run.replay` analyses them later. Count in `unanalysed_blocks`.
        """
        if not isinstance(item, Block):
            self.process(item)
            return
        self._take(item)
        if item.source == "detector":
            self.unanalysed_blocks += 1

    def finish(self) -> list[Estimate]:
        """The end of the stream: in sweep mode, close the open step and store the result.

        A sweep's last step is otherwise never closed into a point (steps close when the next
        setting arrives), so its point, and the fit with it, would be missing.
        `bench.estimator.report` closes it; its cumulative estimate is stored as the run's last
        one (what `gainbench summary` reports). Other modes need nothing (their last
        cumulative estimate already holds every finished window). Nothing is done after a
        late close that stored blocks without analysing them (`store_only`): the analysis is
        incomplete then, and a replay finishes it. Call once, after the last item.
        """
        while self._pending:  # settings timed after the last sample: applied now, in order
            self._apply_now(self._pending.popleft())
        if not est.mode_of(self.state.mode).closes_steps or self.unanalysed_blocks:
            return []
        estimates = [
            dataclasses.replace(e, extra=MappingProxyType({**e.extra, "final": True}))
            for e in est.report(self.state)
        ]
        self._estimates(estimates)
        return estimates

    def _take(self, block: Block) -> None:
        """Store ``block`` (first: nothing is lost), check its sample index, count it."""
        if self.store is not None:
            self.store.append_block(block)
        self.blocks += 1
        if block.source == "detector":
            if block.first_index >= 0:
                self._index_gap(block)
            self.samples += block.n
            self._t = max(self._t, block.t_end)  # data time: the newest detector sample

    def _block(self, block: Block) -> None:
        self._take(block)
        if block.source == "detector":
            self._detector(block)
        elif block.source == "pump":
            self._pump_block(block)
        else:
            self.state, estimates = est.update(self.state, block)  # e.g. wavelength settings
            self._estimates(estimates)

    def _detector(self, block: Block) -> None:
        if self._pending:
            self._apply_due(block.t_end)
        self.state, estimates = est.update(self.state, block)  # 2. estimator
        self._estimates(estimates)
        self._next_detector_seq = block.seq + 1
        self._remember(block)
        if block.dt > 0:
            self.sample_rate = 1.0 / block.dt
        if not self.traces:
            return
        probe, ref = block.column(PROBE), block.column(REFERENCE)
        # a lock-in bench has no pump monitor: its trace stays empty (nan), not zero
        mon = block.column(PUMP_MONITOR) if PUMP_MONITOR in block.channels else np.full(block.n, np.nan)
        dark = self.state.dark
        dp = dark.probe if dark is not None else 0.0
        dr = dark.reference if dark is not None else 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            s = (probe - dp) / (ref - dr)
        k = max(1, min(block.n, int(round(LEVELS_SPAN / block.dt)) if block.dt > 0 else 1))
        with np.errstate(invalid="ignore"):
            levels = {
                PROBE: float(np.mean(probe[-k:])),
                REFERENCE: float(np.mean(ref[-k:])),
                "transmission": float(np.mean(s[-k:])),
            }
        with self._lock:  # 3. display history
            self.trace.add(block.times(), np.column_stack([probe, ref, s, mon]))
            self._levels = levels

    def _index_gap(self, block: Block) -> None:
        """Log a ``gap`` event when a detector block does not start where the previous one ended."""
        expected = self._next_detector_index
        self._next_detector_index = block.first_index + block.n
        missing = block.first_index - expected
        if missing == 0:
            return
        if missing > 0:
            text = f"detector: {missing} sample sets missing before sample {block.first_index}"
        else:
            text = f"detector: sample index went back from {expected} to {block.first_index}"
        # t: the first missing sample's time; data as a CSV import's gaps (first_index: after the gap)
        self.record_event(
            Event(
                block.t0 - max(missing, 0) * block.dt,
                "gap",
                text,
                data={
                    "source": block.source,
                    "first_missing": expected,
                    "missing": missing,
                    "first_index": block.first_index,
                    "seq": block.seq,
                },
            )
        )

    def _pump_block(self, block: Block) -> None:
        # (the guard judges pump readings in the reader's thread: `bench.safety.guard_checks`)
        row = block.data[-1]
        with self._lock:
            self._pump = {c: float(v) for c, v in zip(block.channels, row)}
            if self.traces:
                self.pump_trace.add_block(block)
        if SAMPLE_TEMP in block.channels:  # the sample's temperature, for the heating correction
            temps = block.column(SAMPLE_TEMP)
            if np.isfinite(temps).any():
                only = Block(
                    block.source,
                    block.seq,
                    block.t0,
                    block.dt,
                    block.first_index,
                    (SAMPLE_TEMP,),
                    temps[:, None],
                )
                self.state, _ = est.update(self.state, only)

    def _comm(self, status: CommStatus) -> None:
        if not status.ok or status.detail != "recovered":
            self.faults += 0 if status.ok else 1
            self.last_fault = f"{status.source}: {status.detail}"
            self.record_event(
                Event(
                    status.t,
                    "fault",
                    f"{status.source}: {status.detail}",
                    data={"source": status.source, "ok": status.ok, "lost": status.lost},
                )
            )
        elif status.ok:
            self.record_event(
                Event(
                    status.t,
                    "fault",
                    f"{status.source}: communication recovered",
                    data={"source": status.source, "ok": True},
                )
            )

    def _estimates(self, estimates: list[Estimate]) -> None:
        if not estimates:
            return
        self.last_estimates = estimates
        if self.store is not None:
            self.store.append_estimates(estimates)
        self.all_estimates_count += len(estimates)
        with self._lock:
            for e in estimates:
                if e.scope == "cumulative":
                    self._latest = e
                    self.estimate_history.add(e)
                else:
                    self._window = e

    def _remember(self, block: Block) -> None:
        self._recent.append(block)
        while (
            len(self._recent) > RECENT_MIN_BLOCKS
            and self._recent[-1].t_end - self._recent[0].t_end > RECENT_SECONDS
        ):
            self._recent.popleft()

    # -- controls -------------------------------------------------------------------------
    def apply(self, control: Control, *, at_data_time: bool = True) -> None:
        """Apply ``control`` before the next detector block and store it as an event.

        With ``at_data_time`` a ``setting`` waits until the data reach its time: it is applied
        before the first detector block that ends at or after ``control.t`` (a consumer behind
        the readers would otherwise start the new step on samples taken before the change, and
        a sweep step would mix two pump levels). Controls after a waiting one wait with it, in
        order. Replay applies stored controls where they were applied (``at_data_time=False``).
        """
        if at_data_time and (self._pending or (control.kind == "setting" and control.t > self._t)):
            self._pending.append(control)
            return
        self._apply_now(control)

    def _apply_due(self, t_end: float) -> None:
        """Apply the waiting controls that are due before data ending at ``t_end``."""
        while self._pending and (self._pending[0].kind != "setting" or self._pending[0].t <= t_end):
            self._apply_now(self._pending.popleft())

    def _apply_now(self, control: Control) -> None:
        before_seq = self._next_detector_seq
        data = dict(control.data)
        text = control.kind
        if control.kind == "dark" and "probe_v" in data:  # levels measured apart and given
            dark = est.Dark(
                float(data["probe_v"]),
                float(data.get("probe_sigma_v", 0.0)),
                float(data["reference_v"]),
                float(data.get("reference_sigma_v", 0.0)),
                int(data.get("n_samples", 0)),
                control.t,
            )
            self.state = est.with_dark(self.state, dark)
            text = f"dark given: probe {dark.probe * 1e3:.4g} mV, reference {dark.reference * 1e3:.4g} mV"
        elif control.kind in ("dark", "baseline", "background"):
            t0, t1 = float(data["t_start"]), float(data["t_end"])
            blocks = [_slice(b, t0, t1) for b in self._recent if b.t_end >= t0 and b.t0 <= t1]
            blocks = [b for b in blocks if b is not None and b.n > 0]
            if not blocks:
                self.procedure_results.append((control.kind, False, "no detector samples in the window"))
                self.record_event(
                    Event(
                        control.t,
                        "procedure",
                        f"{control.kind} capture failed: no detector "
                        f"samples between {t0:.3f} s and {t1:.3f} s",
                        control.who,
                        data={**data, "control": control.kind, "ok": False, "before_seq": before_seq},
                    )
                )
                return
            try:
                resume = data.get("t_resume")
                text = self._capture(control.kind, blocks, None if resume is None else float(resume))
            except ValueError as exc:  # the data cannot give a dark or baseline: say so, go on
                self.procedure_results.append((control.kind, False, str(exc)))
                self.record_event(
                    Event(
                        control.t,
                        "procedure",
                        f"{control.kind} capture failed: {exc}",
                        control.who,
                        data={**data, "control": control.kind, "ok": False, "before_seq": before_seq},
                    )
                )
                return
        elif control.kind == "mode":
            mode = str(data["mode"])
            if self._takes_emission(mode) and self._emission:  # the pump's state goes on with it
                given = dict(data.get("settings") or {})
                data = {**data, "settings": {**self._emission, **given}}
            keep_dark, keep_base, keep_bg = self.state.dark, self.state.baseline, self.state.background
            self.state = est.new_state(self.params, mode, data.get("settings"))
            self.state = est.with_baseline(est.with_dark(self.state, keep_dark), keep_base)
            if keep_bg is not None:
                self.state = est.with_background(self.state, keep_bg)
            text = f"mode {mode}"
        elif control.kind == "setting":
            self.state = est.with_setting(self.state, t=control.t, **data)
            text = "setting " + ", ".join(
                f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in data.items()
            )
        self.procedure_results.append((control.kind, True, text))
        self.record_event(
            Event(
                control.t,
                "procedure" if control.kind in ("dark", "baseline", "background") else "setting",
                text,
                control.who,
                data={**data, "control": control.kind, "ok": True, "before_seq": before_seq},
            )
        )

    def _capture(self, kind: str, blocks: list[Block], resume: float | None = None) -> str:
        """Capture a dark, a baseline or a background from ``blocks``; the event text. ValueError if impossible."""
        if kind == "dark":
            dark = est.capture_dark(blocks)
            self.state = est.with_dark(self.state, dark)
            return f"dark captured: probe {dark.probe * 1e3:.3f} mV, reference {dark.reference * 1e3:.3f} mV"
        if kind == "background":
            settle = self.params.settle_time if est.mode_of(self.state.mode).timing is not None else 0.0
            threshold = self.params.pump_threshold(self.state.settings.get("pump_power"))
            bg = est.capture_background(blocks, self.state.dark, pump_threshold_v=threshold, settle_s=settle)
            self.state = est.with_background(self.state, bg, t_resume=resume)
            return f"background captured: probe {bg.probe * 1e3:.4g} ± {bg.probe_sigma * 1e3:.2g} mV above its dark"
        base = est.capture_baseline(blocks, self.state.dark, pump_threshold_v=self.params.pump_threshold_v)
        self.state = est.with_baseline(self.state, base)
        return f"baseline captured: S_off = {base.value:.6g} +- {base.sigma:.2g}"

    @property
    def data_time(self) -> float:
        """Run-clock time of the newest sample processed."""
        return self._t

    def drain_controls(self, q) -> None:
        """Process everything waiting on the control queue (controls, events, truth)."""
        while True:
            try:
                item = q.get_nowait()
            except queue.Empty:
                return
            self.process(item)

    drain_events = drain_controls

    # -- events, housekeeping -------------------------------------------------------------
    def record_event(self, event: Event) -> None:
        if self.store is not None:
            self.store.append_event(event)
        with self._lock:
            self._events.append(event)

    def tick(self, now_run: float) -> None:
        """Periodic work while the stream is quiet: flush, stale checks, drop reports."""
        if self.drop_totals is not None:
            counts, samples = self.drop_totals()
            n, s = sum(counts.values()), sum(samples.values())
            if (n, s) != self._reported_drops:
                dn, ds = n - self._reported_drops[0], s - self._reported_drops[1]
                self._reported_drops = (n, s)
                self.record_event(
                    Event(
                        now_run,
                        "drop",
                        f"{dn} blocks ({ds} samples) dropped: queue full",
                        data={"blocks": dn, "samples": ds, "by_source": counts},
                    )
                )
        if self.store is not None:
            self.store.flush_if_due()

    # -- for displays -----------------------------------------------------------------------
    def snapshot(self, *, with_history: bool = True) -> Snapshot:
        gp = self.guarded_pump
        drops = self._reported_drops
        store = self.store
        flush_age = None
        size = None
        if store is not None:
            last = getattr(store, "_last_flush", None)
            flush_age = None if last is None else max(0.0, time.monotonic() - last)
            size = _file_size(getattr(store, "path", None))
        with self._lock:
            return Snapshot(
                t=self._t,
                mode=self.state.mode,
                estimate=self._latest,
                window=self._window,
                has_dark=self.state.dark is not None,
                has_baseline=self.state.baseline is not None,
                pump=MappingProxyType(dict(self._pump)),
                guard_state=gp.state if gp is not None else "replay",
                trip_reason=gp.trip_reason if gp is not None else None,
                blocks=self.blocks,
                samples=self.samples,
                drops=drops[0],
                dropped_samples=drops[1],
                faults=self.faults,
                last_fault=self.last_fault,
                trace=self.trace.view() if with_history else None,
                pump_trace=self.pump_trace.view() if with_history else None,
                estimates=self.estimate_history.view() if with_history else None,
                truth=None if self._truth is None else MappingProxyType(dict(self._truth)),
                events=tuple(self._events),
                last_flush_age=flush_age,
                store_bytes=size,
                sample_rate=self.sample_rate,
                extra=MappingProxyType(dict(self.extra)),
                levels=MappingProxyType(dict(self._levels)),
            )


def _slice(block: Block, t0: float, t1: float) -> Block | None:
    """The part of ``block`` with sample times in [t0, t1]."""
    if block.dt <= 0:
        return block if t0 <= block.t0 <= t1 else None
    i0 = max(0, int(np.ceil((t0 - block.t0) / block.dt - 1e-9)))
    i1 = min(block.n, int(np.floor((t1 - block.t0) / block.dt + 1e-9)) + 1)
    if i1 <= i0:
        return None
    if i0 == 0 and i1 == block.n:
        return block
    return Block(
        block.source,
        block.seq,
        block.t0 + i0 * block.dt,
        block.dt,
        block.first_index + i0,
        block.channels,
        block.data[i0:i1],
    )


def _file_size(path) -> int | None:
    if path is None:
        return None
    try:
        import os

        total = os.path.getsize(path)
        wal = str(path) + "-wal"
        if os.path.exists(wal):
            total += os.path.getsize(wal)
        return total
    except OSError:
        return None
