"""A run's detector signals, read once for the signals figure: `signal_trace` streams the run's
detector blocks through `MinMaxDecimator` (min / max / mean per time bucket; bounded memory
whatever the run's length) and reads the dark captures and the pump's output state on the way.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from bench.records import PROBE, PUMP_MONITOR, PUMP_ON, REFERENCE, Block, Event

#: Signal channels of the trace: (name, axis label).
SIGNAL_PANELS = (
    (PROBE, "probe (V)"),
    (REFERENCE, "reference (V)"),
    ("S", "S (normalised\ntransmission)"),
    (PUMP_MONITOR, "pump monitor (V)"),
)


class MinMaxDecimator:
    """Min, max and mean of named signals per time bucket, fed block by block.

    At most ``buckets`` buckets are kept. They start ``width`` seconds wide at the first sample
    fed; when a sample falls past the last bucket, neighbouring buckets are merged (the width
    doubles, as often as needed), so memory stays bounded and no span must be known ahead.
    Non-finite samples are left out. Samples must come in non-decreasing time order overall
    (each block's own samples may come in any order).
    """

    def __init__(self, names: Sequence[str], buckets: int = 800, width: float = 1e-3) -> None:
        if isinstance(names, str) or not names or not all(isinstance(n, str) and n for n in names):
            raise ValueError(f"names: expected a sequence of signal names, got {names!r}")
        if isinstance(buckets, bool) or not isinstance(buckets, int) or buckets < 2:
            raise ValueError(f"buckets: expected a whole number of at least 2, got {buckets!r}")
        if not (isinstance(width, (int, float)) and math.isfinite(width) and width > 0):
            raise ValueError(f"width: expected a positive time in s, got {width!r}")
        self.names = tuple(names)
        self.buckets = buckets
        self.width = float(width)
        self.origin: float | None = None
        self.samples = 0
        self._min = {n: np.full(buckets, np.inf) for n in self.names}
        self._max = {n: np.full(buckets, -np.inf) for n in self.names}
        self._sum = {n: np.zeros(buckets) for n in self.names}
        self._count = {n: np.zeros(buckets, np.int64) for n in self.names}
        self._used = 0  # buckets 0 .. _used - 1 have been reached

    def add(self, t: np.ndarray, columns: Mapping[str, np.ndarray]) -> None:
        """Add samples at times ``t`` (s); ``columns`` maps a name of `names` to values."""
        t = np.asarray(t, dtype=np.float64)
        if t.ndim != 1:
            raise ValueError(f"t: expected a 1-d array of times, got shape {t.shape}")
        for name, v in columns.items():
            if name not in self._min:
                raise ValueError(f"columns: {name!r} is not one of {', '.join(self.names)}")
            if np.shape(v) != t.shape:
                raise ValueError(f"columns: {name!r} has shape {np.shape(v)}, the times {t.shape}")
        if t.size == 0:
            return
        if not np.all(np.isfinite(t)):
            raise ValueError("t: times must be finite")
        if self.origin is None:
            self.origin = float(t.min())
        idx = np.floor((t - self.origin) / self.width).astype(np.int64)
        np.maximum(idx, 0, out=idx)
        top = int(idx.max())
        if top >= self.buckets:
            factor = 1 << int(math.ceil(math.log2((top + 1) / self.buckets)))
            while top // factor >= self.buckets:  # guard against rounding of log2
                factor <<= 1
            self._coarsen(factor)
            idx //= factor
        order = None
        if idx.size > 1 and np.any(idx[1:] < idx[:-1]):
            order = np.argsort(idx, kind="stable")
            idx = idx[order]
        starts = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
        where = idx[starts]
        for name, raw in columns.items():
            v = np.asarray(raw, dtype=np.float64)
            if order is not None:
                v = v[order]
            ok = np.isfinite(v)
            lo = np.minimum.reduceat(np.where(ok, v, np.inf), starts)
            hi = np.maximum.reduceat(np.where(ok, v, -np.inf), starts)
            self._min[name][where] = np.minimum(self._min[name][where], lo)
            self._max[name][where] = np.maximum(self._max[name][where], hi)
            self._sum[name][where] += np.add.reduceat(np.where(ok, v, 0.0), starts)
            self._count[name][where] += np.add.reduceat(ok.astype(np.int64), starts)
        self._used = max(self._used, int(where[-1]) + 1)
        self.samples += int(t.size)

    def _coarsen(self, factor: int) -> None:
        n = self.buckets
        m = -(-n // factor) * factor
        for store, fill, reduce in (
            (self._min, np.inf, np.min),
            (self._max, -np.inf, np.max),
            (self._sum, 0.0, np.sum),
            (self._count, 0, np.sum),
        ):
            for name, arr in store.items():
                padded = np.full(m, fill, dtype=arr.dtype)
                padded[:n] = arr
                merged = reduce(padded.reshape(-1, factor), axis=1)
                out = np.full(n, fill, dtype=arr.dtype)
                out[: merged.size] = merged
                store[name] = out
        self.width *= factor
        self._used = -(-self._used // factor)

    def result(self) -> Trace:
        """The buckets reached so far (empty buckets hold NaN)."""
        k = self._used
        origin = 0.0 if self.origin is None else self.origin
        lo, hi, mean = {}, {}, {}
        for name in self.names:
            count = self._count[name][:k]
            empty = count == 0
            lo[name] = np.where(empty, np.nan, self._min[name][:k])
            hi[name] = np.where(empty, np.nan, self._max[name][:k])
            with np.errstate(invalid="ignore", divide="ignore"):
                mean[name] = np.where(empty, np.nan, self._sum[name][:k] / np.maximum(count, 1))
        edges = origin + self.width * np.arange(k + 1)
        return Trace(edges=edges, low=lo, high=hi, mean=mean, samples=self.samples, width=self.width)


@dataclass(frozen=True)
class Trace:
    """Decimated signals: bucket ``i`` spans ``edges[i]`` to ``edges[i + 1]`` (s)."""

    edges: np.ndarray
    low: Mapping[str, np.ndarray]
    high: Mapping[str, np.ndarray]
    mean: Mapping[str, np.ndarray]
    samples: int
    width: float

    @property
    def centres(self) -> np.ndarray:
        return 0.5 * (self.edges[:-1] + self.edges[1:])


@dataclass(frozen=True)
class DarkCapture:
    """A dark capture of the run: the samples between ``t_start`` and ``t_end`` (probe blocked),
    in effect from ``t_applied`` on."""

    t_start: float
    t_end: float
    t_applied: float
    probe: float  # V
    reference: float  # V


@dataclass(frozen=True)
class SignalData:
    trace: Trace
    darks: tuple[DarkCapture, ...]
    pump_on: tuple[tuple[float, float], ...] | None  # intervals with the pump output on; None: unknown
    blocks: int


def _sample_slice(block: Block, t0: float, t1: float) -> np.ndarray:
    t = block.times()
    return (t >= t0) & (t <= t1)


def dark_captures(reader: Any, events: Iterable[Event], source: str = "detector") -> list[DarkCapture]:
    """The run's successful dark captures, each averaged again from its stored samples."""
    out = []
    for ev in events:
        d = ev.data if isinstance(ev.data, Mapping) else {}
        if ev.kind != "procedure" or d.get("control") != "dark" or not d.get("ok", True):
            continue
        try:
            t0, t1 = float(d["t_start"]), float(d["t_end"])
        except (KeyError, TypeError, ValueError):
            continue
        p = _window_mean(reader, source, PROBE, t0, t1)
        r = _window_mean(reader, source, REFERENCE, t0, t1)
        if p is not None and r is not None:
            out.append(DarkCapture(t0, t1, float(ev.t), p, r))
    return out


def _window_mean(reader: Any, source: str, channel: str, t0: float, t1: float) -> float | None:
    total, n = 0.0, 0
    for block in reader.iter_blocks(source=source, start=t0, stop=t1 + 1e-9):
        if channel in block.channels:
            sel = _sample_slice(block, t0, t1)
            total += float(block.column(channel)[sel].sum())
            n += int(sel.sum())
    return total / n if n else None


def reference_level(reader: Any, events: Iterable[Event], source: str = "detector") -> float | None:
    """Mean reference voltage (V, dark not subtracted) during the run's first baseline capture."""
    for ev in events:
        d = ev.data if isinstance(ev.data, Mapping) else {}
        if ev.kind == "procedure" and d.get("control") == "baseline" and d.get("ok", True):
            try:
                return _window_mean(reader, source, REFERENCE, float(d["t_start"]), float(d["t_end"]))
            except (KeyError, TypeError, ValueError):
                continue
    return None


#: S is drawn only where the dark-corrected reference is above this fraction of its level during
#: the baseline capture (a blocked or closing beam gives a ratio of noise over noise).
MIN_REFERENCE_FRACTION = 0.1


def signal_trace(
    reader: Any,
    events: Sequence[Event],
    *,
    buckets: int = 800,
    source: str = "detector",
    duration: float | None = None,
) -> SignalData:
    """Stream the run's detector blocks once into `MinMaxDecimator` (probe, reference, S, pump
    monitor) and read the pump output's on/off intervals from the pump's blocks.

    ``S = (V_probe - dark_p) / (V_ref - dark_r)`` with the dark in effect at each block (the
    run's first dark for blocks before it; zero without one); samples inside a dark capture, or
    where ``V_ref - dark_r`` is below `MIN_REFERENCE_FRACTION` of its level during the baseline
    capture (or not positive, without a baseline), have no S.
    """
    darks = dark_captures(reader, events, source)
    level = reference_level(reader, events, source)
    # the run clock starts with the run, so its samples fit in the run's duration (5 % spare)
    width = (1.05 * duration / buckets) if duration and duration > 0 else 1e-3
    dec = MinMaxDecimator([n for n, _ in SIGNAL_PANELS], buckets=buckets, width=width)
    windows = [(d.t_start, d.t_end) for d in darks]
    n_blocks = 0
    for block in reader.iter_blocks(source=source):
        if PROBE not in block.channels or REFERENCE not in block.channels or block.n == 0:
            continue
        n_blocks += 1
        t = block.times()
        vp, vr = block.column(PROBE), block.column(REFERENCE)
        dark = None
        for d in darks:
            if d.t_applied <= block.t0:
                dark = d
        if dark is None and darks:
            dark = darks[0]
        dp, dr = (dark.probe, dark.reference) if dark is not None else (0.0, 0.0)
        den = vr - dr
        floor = MIN_REFERENCE_FRACTION * (level - dr) if level is not None and level > dr else 0.0
        good = den > floor
        with np.errstate(invalid="ignore", divide="ignore"):
            s = np.where(good, (vp - dp) / np.where(good, den, 1.0), np.nan)
        for a, b in windows:
            if block.t0 <= b and block.t_end >= a:
                s[(t >= a) & (t <= b)] = np.nan
        cols = {PROBE: vp, REFERENCE: vr, "S": s}
        if PUMP_MONITOR in block.channels:
            cols[PUMP_MONITOR] = block.column(PUMP_MONITOR)
        dec.add(t, cols)
    return SignalData(dec.result(), tuple(darks), pump_intervals(reader), n_blocks)


def pump_intervals(reader: Any, source: str = "pump") -> tuple[tuple[float, float], ...] | None:
    """Intervals (s) in which the pump driver reported its output on (its ``pump_on`` channel)."""
    out: list[tuple[float, float]] = []
    seen = False
    on_since: float | None = None
    last_t = None
    for block in reader.iter_blocks(source=source):
        if PUMP_ON not in block.channels or block.n == 0:
            continue
        seen = True
        t, v = block.times(), block.column(PUMP_ON) > 0.5
        before = np.r_[on_since is not None, v[:-1]]  # the state before each sample
        for i in np.flatnonzero(v != before):
            if v[i]:
                on_since = float(t[i])
            else:
                out.append((on_since, float(t[i])))
                on_since = None
        last_t = float(t[-1])
    if not seen:
        return None
    if on_since is not None and last_t is not None:
        out.append((on_since, last_t))
    return tuple(out)
