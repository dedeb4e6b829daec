"""An independent synthetic pumped sample for the chopped and decay tests.

Written apart from the estimator and sharing no code with it: the gain of a thin sample under
a 50 % square-wave pump follows the first-order rate equation (W. Koechner, *Solid-State Laser
Engineering*, 6th ed., Springer, 2006, sec. 1.4; O. Svelto, *Principles of Lasers*, 5th ed.,
2010, ch. 7): with the pump on, ``d lnR/dt = (A - lnR) / tau_rise``; with it off,
``d lnR/dt = -lnR / tau_fall``. The solution is exact between edges, so it is evaluated at
every sample time ``t_i = i dt`` from the value at the last edge. The edges fall wherever the
square wave puts them, at any sub-sample phase (``edge_phase`` of a sample interval after a
sample); the pump monitor reads the pump state at the sample instant.
"""

from __future__ import annotations

import math

import numpy as np


def pumped(
    n: int,
    hz: float,
    a_on: float,
    tau_fall: float,
    *,
    tau_rise: float,
    dt: float,
    edge_phase: float = 0.37,
    start_on: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """(ln R, pump on) at ``t_i = i dt``, i < n, for a pump square wave of ``hz``.

    The first edge after t = 0 is at ``edge_phase * dt`` (0 <= edge_phase < 1), later ones
    every half period. The pump is on before that edge if ``start_on`` (and ln R starts at
    its pumped level ``a_on``), else off (ln R 0).
    """
    if not 0.0 <= edge_phase < 1.0:
        raise ValueError(f"edge_phase: expected [0, 1), got {edge_phase!r}")
    half = 0.5 / hz
    t_end = n * dt
    edges = edge_phase * dt + half * np.arange(int(math.ceil(t_end / half)) + 1)
    edges = edges[edges < t_end]
    # state after edge j: on when (j even) != start_on, i.e. it toggles at every edge
    starts = np.concatenate([[0.0], edges])
    on_after = np.array([start_on] + [(j % 2 == 0) != start_on for j in range(edges.size)])
    x_start = np.empty(starts.size)
    x = a_on if start_on else 0.0
    for j in range(starts.size):
        x_start[j] = x
        t_next = starts[j + 1] if j + 1 < starts.size else t_end
        target, tau = (a_on, tau_rise) if on_after[j] else (0.0, tau_fall)
        x = target + (x - target) * math.exp(-(t_next - starts[j]) / tau)
    t = np.arange(n) * dt
    k = np.searchsorted(starts, t, side="right") - 1
    target = np.where(on_after[k], a_on, 0.0)
    tau = np.where(on_after[k], tau_rise, tau_fall)
    lnr = target + (x_start[k] - target) * np.exp(-(t - starts[k]) / tau)
    return lnr, on_after[k]
