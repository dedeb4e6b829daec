"""Analysing an imported run as a recorded one is analysed live.

`bench.store.csv_import` stores the file's samples first; `analyse` then reads the stored blocks
back and feeds them through the same consumer as a live run (`bench.run.consumer.Consumer`), so
the run's live analysis holds the estimates and `gainbench replay` reproduces them. The
procedures a live run carries out on the bench are taken from the data:

- the dark: levels the user measured (``probe_v``, ``reference_v``), or the mean of a stretch
  of the file recorded with the probe blocked (a *dark window*), applied before the first
  block as given levels;
- the baseline: the pump-off samples before the pump first switches on (after the dark window
  when that lies before it), applied just before the first pump-on sample, as a live run
  captures it just before arming. Like a live capture it uses at most the consumer's recent
  data (`bench.run.consumer.RECENT_SECONDS`, or its last `bench.run.consumer.RECENT_MIN_BLOCKS`
  blocks).

The analysis ends with the estimator's report of everything (`bench.estimator.report`), which
counts the samples after the last complete window; the run's meta ``final_report`` tells a
replay to do the same.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

import bench.estimator as est
from bench.errors import ConfigError
from bench.estimator.params import EstimatorParams
from bench.records import Block, Estimate, Event
from bench.run.consumer import Consumer, Control

#: Meta key: the analysis ends with `bench.estimator.report` (replay does the same).
FINAL_REPORT = "final_report"

#: Threshold (V) on the stored 0/1 V pump channel of an imported run.
PUMP_THRESHOLD_V = 0.5

WHO = "csv import"


@dataclass(frozen=True)
class DarkGiven:
    """The dark of an import: levels (V), or a window of the file's time column (s)."""

    probe_v: float | None = None
    reference_v: float | None = None
    window: tuple[float, float] | None = None
    text: str = ""  # as the user wrote it, for errors

    def __post_init__(self) -> None:
        levels = self.probe_v is not None or self.reference_v is not None
        if levels and self.window is not None:
            raise ValueError("dark: give the levels or a window, not both")
        if levels and (self.probe_v is None or self.reference_v is None):
            raise ValueError("dark: needs both the probe and the reference level")
        for v in (self.probe_v, self.reference_v):
            if v is not None and not math.isfinite(v):
                raise ValueError(f"dark: level {v!r} is not a finite voltage")
        if self.window is not None:
            a, b = self.window
            if not (math.isfinite(a) and math.isfinite(b) and b > a):
                raise ValueError(
                    f"dark: window {self.window!r} is not a time span start:end with end after start"
                )


class _EventsAndEstimates:
    """What the consumer stores, but the blocks (in the run file already) and its ``gap``
    events (the import logged each gap, with the line of the file)."""

    def __init__(self, writer: Any) -> None:
        self._writer = writer

    def append_block(self, block: Block) -> None:
        pass

    def append_event(self, event: Event) -> None:
        if event.kind != "gap":
            self._writer.append_event(event)

    def append_estimates(self, estimates: Iterable[Estimate]) -> None:
        self._writer.append_estimates(estimates)

    def append_truth(self, t: float, values: Any) -> None:
        self._writer.append_truth(t, values)

    def flush_if_due(self) -> bool:
        return self._writer.flush_if_due()


def _window_part(block: Block, t0: float, t1: float) -> Block | None:
    """The samples of ``block`` with times in [t0, t1)."""
    t = block.times()
    keep = (t >= t0) & (t < t1)
    if not keep.any():
        return None
    i0, i1 = int(np.argmax(keep)), int(len(keep) - np.argmax(keep[::-1]))
    return Block(
        block.source,
        block.seq,
        float(t[i0]),
        block.dt,
        block.first_index + i0,
        block.channels,
        block.data[i0:i1],
    )


def _dark_from_window(reader: Any, dark: DarkGiven, t_offset: float, csv_name: str) -> est.Dark:
    a, b = (w - t_offset for w in dark.window)  # type: ignore[union-attr]
    parts = [
        p
        for blk in reader.iter_blocks("detector", start=a, stop=b)
        if (p := _window_part(blk, a, b)) is not None
    ]
    if not parts:
        raise ConfigError(
            f"--dark-window {dark.text}: no sample of {csv_name} lies in that time span "
            "(times as in the file's time column)"
        )
    try:
        return est.capture_dark(parts)
    except ValueError as exc:
        raise ConfigError(f"--dark-window {dark.text}: {exc}") from None


def analyse(
    writer: Any,
    reader: Any,
    params: EstimatorParams,
    mode: str,
    *,
    dark: DarkGiven | None,
    first_on: float | None,
    t_offset: float,
    csv_name: str,
) -> list[Estimate]:
    """Run the stored detector blocks of ``reader`` through a consumer that stores its events and
    estimates with ``writer`` (the run's live analysis); returns the final report.

    ``first_on`` is the run-clock time of the first pump-on sample (a block starts there), or
    None; ``t_offset`` the file time of run-clock 0 (dark windows are in file time).
    """
    consumer = Consumer(params, mode, {}, store=_EventsAndEstimates(writer), traces=False)
    base_start = 0.0
    if dark is not None:
        data: dict[str, Any]
        if dark.window is not None:
            d = _dark_from_window(reader, dark, t_offset, csv_name)
            data = {
                "probe_v": d.probe,
                "reference_v": d.reference,
                "probe_sigma_v": d.probe_sigma,
                "reference_sigma_v": d.reference_sigma,
                "window_file_s": list(dark.window),
                "n_samples": d.n_samples,
            }
            end = dark.window[1] - t_offset
            if first_on is None or end <= first_on:
                base_start = end
        else:
            data = {"probe_v": dark.probe_v, "reference_v": dark.reference_v}
        consumer.apply(Control("dark", 0.0, data, WHO))
    pending_baseline = first_on is not None
    for block in reader.iter_blocks("detector"):
        if pending_baseline and block.t0 >= first_on - 0.5 * block.dt:
            consumer.apply(
                Control(
                    "baseline", block.t0, {"t_start": base_start, "t_end": block.t0 - 0.5 * block.dt}, WHO
                )
            )
            pending_baseline = False
        consumer.process(block)
    final = est.report(consumer.state)
    if final:
        writer.append_estimates(final)
    return final
