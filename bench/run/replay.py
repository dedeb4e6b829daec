"""Replay and re-analysis: stored raw blocks through the same consumer as a live run.

The consumer (`bench.run.consumer.Consumer`) is fed the run's blocks in the order they were
stored, and every stored control (dark, baseline, mode, setting) is applied before the same
detector block it was applied before live. Since the estimator is a pure function of state and
block, a replay with the bench file as recorded reproduces the stored estimates; a
re-analysis with corrected sample parameters (``--set sample.length=5.1mm``) gives new ones,
stored beside the original under a new analysis id, never over it.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import bench.estimator as est
from bench.config import BenchConfig, load_bench_text
from bench.errors import RunStoreError
from bench.estimator.params import EstimatorParams
from bench.physics.spectra import StoredSpectrum, using_stored
from bench.records import Block, Estimate, Event
from bench.run.consumer import Consumer, Control
from bench.run.import_analysis import FINAL_REPORT
from bench.store import RunReader, open_for_analysis


@dataclass
class ReplayResult:
    run_id: str
    analysis_id: int | None  # where the estimates were stored, or None
    estimates: list[Estimate]
    final: Estimate | None
    blocks: int
    samples: int
    seconds: float  # wall-clock time the replay took
    overrides: dict[str, str]
    max_relative_difference: float | None = None  # against the stored live estimates
    compared: int = 0
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def samples_per_second(self) -> float:
        return self.samples / self.seconds if self.seconds > 0 else math.inf


def run_config(reader: RunReader, overrides: Mapping[str, str] | None = None) -> BenchConfig:
    """The bench file recorded with the run, with ``overrides`` applied.

    A run that stored its cross-section spectrum (meta ``spectrum``) uses that copy, whatever
    became of the file since; only an override of ``sample.spectrum`` reads a file again. A
    run without one (older runs) reads the file the bench file names, as before.
    """
    text = reader.meta.get("bench_text")
    if not isinstance(text, str) or not text.strip():
        raise RunStoreError(f"{reader.path}: the run holds no bench file snapshot")
    recorded = reader.meta.get("bench_overrides") or {}
    merged = {**(recorded if isinstance(recorded, dict) else {}), **dict(overrides or {})}
    stored = None
    if reader.meta.get("spectrum") is not None and "sample.spectrum" not in (overrides or {}):
        try:
            stored = StoredSpectrum.from_stored(reader.meta["spectrum"], reader.path.name)
        except ValueError as exc:
            raise RunStoreError(f"{reader.path}: is damaged: {exc}") from None
    with using_stored(stored):
        return load_bench_text(text, f"{reader.path.name} (bench file as recorded)", overrides=merged or None)


def estimator_params(reader: RunReader, cfg: BenchConfig) -> EstimatorParams:
    extra: dict[str, Any] = {}
    stored = reader.meta.get("estimator_overrides")
    if isinstance(stored, Mapping):
        extra.update(stored)
    return EstimatorParams.from_config(cfg, **extra)


def controls_by_seq(events: list[Event]) -> dict[int, list[Control]]:
    """Stored controls keyed by the detector block seq they were applied before."""
    out: dict[int, list[Control]] = {}
    for ev in events:
        kind = ev.data.get("control") if isinstance(ev.data, Mapping) else None
        if kind is None or not ev.data.get("ok", True):
            continue
        data = {k: v for k, v in ev.data.items() if k not in ("control", "ok", "before_seq")}
        out.setdefault(int(ev.data["before_seq"]), []).append(Control(kind, ev.t, data, ev.who))
    return out


def replay(
    path: str | Path,
    *,
    overrides: Mapping[str, str] | None = None,
    speed: float | None = None,
    store: bool | None = None,
    progress: Callable[[int, int], None] | None = None,
    on_block: Callable[[Consumer, Block], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> ReplayResult:
    """Feed a stored run through the consumer.

    Parameters
    ----------
    path : path of a run file.
    overrides : bench-file keys to change (``{"sample.length": "5.1 mm"}``): a re-analysis.
    speed : None for as fast as possible, else a multiple of real time.
    store : store the estimates in the run file as a new analysis. Default: only for a
        re-analysis (with overrides).
    progress : called with (blocks done, blocks in all).
    """
    overrides = dict(overrides or {})
    if speed is not None and not (speed > 0):
        raise ValueError(f"speed: {speed} is not positive")
    with RunReader(path) as reader:
        cfg = run_config(reader, overrides)
        params = estimator_params(reader, cfg)
        mode = str(reader.meta.get("estimator_mode") or reader.meta.get("mode") or "watch")
        settings = reader.meta.get("estimator_settings") or {}
        events = reader.events()
        live = [e for e in reader.estimates()]
        total = reader.block_count()
        run_id = reader.run_id
        do_store = bool(overrides) if store is None else store
        writer = None
        if do_store:
            reader.close()
            writer = open_for_analysis(path, "reanalysis" if overrides else "replay", overrides)
            reader = RunReader(path)
        # the display traces only for a caller that looks at the consumer (the replay screen)
        consumer = Consumer(params, mode, settings, store=None, traces=on_block is not None)
        controls = controls_by_seq(events)
        results: list[Estimate] = []
        start_wall = time.monotonic()
        first_t: float | None = None
        done = 0
        try:
            for block in _blocks(reader):
                if should_stop is not None and should_stop():
                    break
                if speed is not None:
                    first_t = block.t0 if first_t is None else first_t
                    due = start_wall + (block.t0 - first_t) / speed
                    pause = due - time.monotonic()
                    if pause > 0:
                        time.sleep(pause)
                if block.source == "detector":
                    for c in controls.pop(block.seq, ()):
                        consumer.apply(c, at_data_time=False)
                before = consumer.all_estimates_count
                consumer.process(block)
                if consumer.all_estimates_count != before:
                    new = consumer.last_estimates
                    results.extend(new)
                    if writer is not None:
                        writer.append_estimates(new)
                        writer.flush_if_due()
                done += 1
                if on_block is not None:
                    on_block(consumer, block)
                if progress is not None and (done % 50 == 0 or done == total):
                    progress(done, total)
            for seq in sorted(controls):  # controls after the last detector block
                for c in controls[seq]:
                    consumer.apply(c, at_data_time=False)
            if should_stop is None or not should_stop():
                if reader.meta.get(FINAL_REPORT) and done == total:
                    # the analysis ended with the estimator's report of everything (an import)
                    new = est.report(consumer.state)
                else:
                    new = consumer.finish()  # as the live run ended (a sweep's open step)
                results.extend(new)
                if writer is not None and new:
                    writer.append_estimates(new)
        finally:
            if writer is not None:
                writer.close()
        seconds = time.monotonic() - start_wall
        final = next((e for e in reversed(results) if e.scope == "cumulative"), None)
        result = ReplayResult(
            run_id=run_id,
            analysis_id=getattr(writer, "analysis_id", None),
            estimates=results,
            final=final,
            blocks=done,
            samples=consumer.samples,
            seconds=seconds,
            overrides=overrides,
        )
        if not overrides:
            # A run closed while its analysis was behind stored its last blocks unanalysed: the
            # live estimates are then a prefix of the replayed ones.
            unanalysed = any(e.kind == "run" and (e.data or {}).get("unanalysed_blocks") for e in events)
            mine = results[: len(live)] if unanalysed and len(results) > len(live) else results
            if mine and mine[-1].extra.get("final") and not (live and live[-1].extra.get("final")):
                mine = mine[:-1]  # recorded before runs closed a sweep's open step at their end
            result.max_relative_difference, result.compared = compare(live, mine)
        return result


def _blocks(reader: RunReader) -> Iterator[Block]:
    yield from reader.iter_blocks()


def compare(a: list[Estimate], b: list[Estimate]) -> tuple[float | None, int]:
    """Largest relative difference between matching values of two estimate lists."""
    if len(a) != len(b):
        return math.inf, min(len(a), len(b))
    worst = 0.0
    n = 0
    for x, y in zip(a, b):
        if x.scope != y.scope or abs(x.t - y.t) > 1e-9 * max(1.0, abs(x.t)):
            return math.inf, n
        for key, qx in x.values.items():
            qy = y.values.get(key)
            if qy is None:
                return math.inf, n
            for u, v in ((qx.value, qy.value), (qx.sigma, qy.sigma)):
                if math.isnan(u) and math.isnan(v):
                    continue
                if u == v:
                    continue
                worst = max(worst, abs(u - v) / max(abs(u), abs(v), 1e-300))
            n += 1
    return worst, n
