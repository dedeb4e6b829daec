"""The short windows of probe transmission S = probe / reference that a jump is judged on.

`TransmissionWindows` averages each detector block into windows of ``jump_window`` s (carrying
the remainder into the next block), and pairs each new window with the one before and the one
two before: a step that falls inside a window is split between two consecutive pairs, but the
pair one window apart sees it whole. A pair may be compared only when both windows are valid
(S finite, the reference above ``min_reference_fraction`` of full scale), the pump monitor
did not change between them by more than ``pump_steady_fraction``, no pump change falls
between them (within the settle time and the lag allowance), and the caller says the pump is
steady. The rule that judges the pairs is the transmission-jump condition's
(`bench.safety.detector_conditions.check_transmission_jump`), handed to `compare`.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

from bench.records import PROBE, PUMP_MONITOR, REFERENCE, Block


class TransmissionWindows:
    """The last two windows of S and the samples not yet in a window (not thread-safe: the
    monitor's lock covers it).

    ``pump_changes`` is the monitor's record of when the pump changed (shared, read here).
    """

    def __init__(
        self,
        *,
        jump_window: float,
        min_reference_fraction: float,
        pump_steady_fraction: float,
        settle_time: float,
        lag_allowance: float,
        pump_changes: Any,
    ) -> None:
        self.jump_window = jump_window
        self.min_reference_fraction = min_reference_fraction
        self.pump_steady_fraction = pump_steady_fraction
        self.settle_time = settle_time
        self.lag_allowance = lag_allowance
        self._pump_changes = pump_changes
        self.reset()

    def reset(self) -> None:
        """Start afresh (other channels than before)."""
        self._carry: dict[str, np.ndarray] | None = None
        self._carry_next: float | None = None
        # The last two windows: (start, end, S, valid, pump monitor mean).
        self._prev: list[tuple[float, float, float, bool, float]] = []

    def compare(
        self,
        block: Block,
        t: np.ndarray,
        columns: Mapping[str, np.ndarray],
        ranges: Mapping[str, float],
        pump_steady: bool,
        judge: Callable[..., Any],
    ) -> Any:
        """Add ``block``'s windows and judge the new pairs with ``judge(t_before, t_after,
        s_before, s_after, comparable)``; returns what it returns (a jump found, or None).

        After a jump, later windows are compared only with those from the jump on (one report).
        """
        dt = block.dt
        w = max(1, round(self.jump_window / dt)) if dt > 0 else 1
        names = [c for c in (PROBE, REFERENCE, PUMP_MONITOR) if c in columns]
        data = {c: columns[c] for c in names}
        data["t"] = t
        if self._carry is not None and set(self._carry) != set(data):
            self.reset()  # other channels than before: start afresh
        if self._carry is not None and dt > 0:
            if self._carry_next is not None and abs(t[0] - self._carry_next) <= 0.5 * dt:
                data = {key: np.concatenate((self._carry[key], v)) for key, v in data.items()}
            else:
                self._prev = []  # a gap: the windows would not be consecutive
        n = data["t"].shape[0]
        k = n // w
        use = k * w
        self._carry = {key: v[use:] for key, v in data.items()}
        self._carry_next = float(t[-1] + dt) if dt > 0 else None
        if k == 0:
            return None
        means = {c: data[c][:use].reshape(k, w).mean(axis=1) for c in names}
        ref = means[REFERENCE]
        with np.errstate(divide="ignore", invalid="ignore"):
            s = means[PROBE] / ref
        valid = np.isfinite(s) & (ref > self.min_reference_fraction * ranges[REFERENCE])
        pm = means.get(PUMP_MONITOR, np.full(k, math.nan))
        # The windows of this block, after the (up to two) last windows of the stream so far.
        prev = self._prev
        start = np.concatenate(([p[0] for p in prev], data["t"][:use:w]))
        end = np.concatenate(([p[1] for p in prev], data["t"][w - 1 : use : w]))
        s_all = np.concatenate(([p[2] for p in prev], s))
        valid_all = np.concatenate((np.array([p[3] for p in prev], dtype=bool), valid))
        pm_all = np.concatenate(([p[4] for p in prev], pm))
        # Each new window against the one before and the one two before: a step inside a window
        # is split between two consecutive pairs, but the pair one window apart sees it whole.
        new = np.arange(len(prev), len(prev) + k)
        after = np.concatenate([new[new >= lag] for lag in (1, 2)])
        before = np.concatenate([new[new >= lag] - lag for lag in (1, 2)])
        comparable = valid_all[before] & valid_all[after]
        if PUMP_MONITOR in means:
            a, b = pm_all[before], pm_all[after]
            allowed = np.maximum(
                self.pump_steady_fraction * np.maximum(np.abs(a), np.abs(b)), 0.01 * ranges[PUMP_MONITOR]
            )
            comparable &= np.abs(b - a) <= allowed
        if self._pump_changes:
            changes = np.fromiter(self._pump_changes, dtype=np.float64)
            # the change takes effect up to lag_allowance after (or, by the readings' clock,
            # before) the time it was commanded at
            lag = self.lag_allowance
            near = (changes[None, :] > start[before, None] - self.settle_time - lag) & (
                changes[None, :] <= end[after, None] + lag
            )
            comparable &= ~near.any(axis=1)
        if not pump_steady:
            comparable[:] = False
        result = judge(start[before], start[after], s_all[before], s_all[after], comparable)
        keep = range(max(0, len(start) - 2), len(start))
        if result is not None:  # compare later windows with those after the jump only (one report)
            keep = [i for i in keep if start[i] >= result.seen_at]
        self._prev = [
            (float(start[i]), float(end[i]), float(s_all[i]), bool(valid_all[i]), float(pm_all[i]))
            for i in keep
        ]
        return result
