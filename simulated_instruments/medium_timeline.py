"""The medium's evolution in time under a `Drive`: step planning, steady and periodic shortcuts.

`MediumTimeline` owns the slice densities and the simulated time of the medium. `advance`
moves it to a later time and returns the slice-averaged excited density at the requested
sample times. The Python loop runs once per model step, never per sample:

* Steps are the closed-form `GainMedium.step`; they end exactly on every edge of the drive
  (modulation, chopper, ramp pieces). After an edge the step starts at ``model_step`` and
  doubles each step, up to tau/4 and to k dt <= `medium.MAX_K_DT`.
* Steady shortcut: when, for the inputs of the current drive segment, every slice is within
  `STEADY_TOLERANCE` x N_total of its steady state, the rest of the segment is one constant
  piece (for a constant drive, the rest of time).
* Periodic shortcut: when the drive repeats (modulation or chopping at a fixed frequency, no
  ramp under way) and the slice densities at two successive period boundaries agree to
  `STEADY_TOLERANCE` x N_total, the last period's pieces become the orbit and later times are
  evaluated by folding onto it.

Samples inside a step are evaluated from the piece's interpolating polynomial (see
`medium.Piece`), accurate to 1e-6 of the step's transient amplitude. The stepping pattern
depends only on the drive, never on how the caller splits its calls to `advance`, so the result
is the same for any chunking.
"""

from __future__ import annotations

import math

import numpy as np

from simulated_instruments.drive import Drive
from simulated_instruments.medium import MAX_K_DT, GainMedium, Piece, evaluate_pieces

#: Steady (or periodic) when every slice is this close, relative to N_total.
STEADY_TOLERANCE = 1e-9
#: Target of the step control: predictor-corrector difference per step, relative to N_total.
STEP_TOLERANCE = 1e-4


class _Orbit:
    """One period of a periodic steady state, starting at time ``t0``."""

    def __init__(self, t0: float, period: float, pieces: list[Piece]):
        self.t0 = t0
        self.period = period
        self.starts = np.array([p.t0 - t0 for p in pieces])
        self.dts = np.array([p.dt if math.isfinite(p.dt) else 1.0 for p in pieces])
        self.coefs_t = np.array([p.coefs for p in pieces]).T.copy()
        self.pieces = pieces
        self._tiles: dict[tuple[float, int], np.ndarray] = {}

    def phase(self, t):
        return np.mod(np.asarray(t, dtype=float) - self.t0, self.period)

    def _unfolded(self, times: np.ndarray) -> np.ndarray:
        """Evaluate sorted ``times`` by laying copies of the period end to end over them."""
        m0 = math.floor((times[0] - self.t0) / self.period) - 1
        m1 = math.floor((times[-1] - self.t0) / self.period) + 1
        offsets = self.t0 + self.period * np.arange(m0, m1 + 1)
        starts = np.add.outer(offsets, self.starts).ravel()
        reps = m1 - m0 + 1
        return evaluate_pieces(starts, np.tile(self.dts, reps), np.tile(self.coefs_t, reps), times)

    def mean_at(self, times: np.ndarray, step: float | None = None) -> np.ndarray:
        """<N2> at sorted ``times``; ``step`` says they are uniformly spaced by that much."""
        if step is not None and times.size > 1:
            per = self.period / step
            m = round(per)
            if 1 <= m <= 1 << 20 and abs(per - m) <= 1e-9 * per:
                # the samples repeat every m: evaluate one period once, then copy it along
                ph = float(self.phase(times[0]))
                q = math.floor(ph / step + 1e-6)
                sub = max(ph - q * step, 0.0)
                key = (round(sub / step * 1e6) / 1e6, m)
                tile = self._tiles.get(key)
                if tile is None:
                    base = self.t0 + sub + step * np.arange(m)
                    tile = self._unfolded(base)
                    if len(self._tiles) > 64:
                        self._tiles.clear()
                    self._tiles[key] = tile
                q %= m
                return np.resize(np.concatenate((tile[q:], tile[:q])), times.size)
        return self._unfolded(times)

    def state_at(self, t: float) -> np.ndarray:
        ph = float(self.phase(t))
        i = int(np.clip(np.searchsorted(self.starts, ph, side="right") - 1, 0, self.starts.size - 1))
        return self.pieces[i].state_at(ph - self.starts[i])


class MediumTimeline:
    """Slice densities of a `GainMedium` evolving under a `Drive` (see module docstring).

    Parameters
    ----------
    medium : GainMedium
    drive : Drive
        The drive from time ``t`` on; replace it with `set_drive` when a setting changes.
    model_step : float
        First step after an edge, s.
    t : float
        Starting time, s.
    n2 : array_like, optional
        Starting slice densities (m⁻³); zero (unpumped) by default.
    """

    def __init__(
        self,
        medium: GainMedium,
        drive: Drive,
        *,
        model_step: float,
        t: float = 0.0,
        n2: np.ndarray | None = None,
    ):
        if not (math.isfinite(model_step) and model_step > 0):
            raise ValueError(f"model_step: expected a positive time step, got {model_step!r}")
        self.medium = medium
        self.model_step = float(model_step)
        self.max_step = medium.tau / 4.0
        self.t = float(t)
        self.steps = 0  # closed-form steps taken so far (for performance reports)
        self._n2 = np.zeros(medium.slices) if n2 is None else np.array(n2, dtype=float)
        if self._n2.shape != (medium.slices,):
            raise ValueError(f"n2: expected {medium.slices} slice densities, got shape {self._n2.shape}")
        self._reset(drive)

    # -- state -------------------------------------------------------------------------------
    def _reset(self, drive: Drive) -> None:
        self.drive = drive
        self._piece: Piece | None = None
        self._growth = 0
        self._segment: tuple[float, object, bool] | None = None
        self._proxy_gap: float | None = None
        self._controlled = math.inf  # step length the error control allows next  # distance of the last step's end from its steady state
        self._period: tuple[float, float] | None | bool = None  # None: not yet known
        self._boundary: tuple[int, np.ndarray] | None = None
        self._boundary_pieces: list[Piece] = []
        self._orbit: _Orbit | None = None

    def state(self) -> np.ndarray:
        """Excited density of every slice (m⁻³) at the current time."""
        if self._orbit is not None:
            return self._orbit.state_at(self.t)
        if self._piece is not None:
            return self._piece.state_at(self.t - self._piece.t0)
        return self._n2.copy()

    def mean(self) -> float:
        """Slice-averaged (length-averaged) excited density now, m⁻³."""
        return float(np.mean(self.state()))

    @property
    def regime(self) -> str:
        """``"periodic"``, ``"steady"`` (a constant piece to the end of time) or ``"stepping"``."""
        if self._orbit is not None:
            return "periodic"
        if self._piece is not None and self._piece.constant and math.isinf(self._piece.end):
            return "steady"
        return "stepping"

    def set_drive(self, drive: Drive) -> None:
        """From now on the medium follows ``drive`` (its slice densities carry over)."""
        n2 = self.state()
        self._n2 = n2
        self._reset(drive)

    # -- time ---------------------------------------------------------------------------------
    def advance(
        self, t_end: float, times: np.ndarray | None = None, step: float | None = None
    ) -> np.ndarray | None:
        """Move to ``t_end``; return <N2> at ``times`` (sorted, within [now, t_end)) if given.

        ``step`` may say that ``times`` are uniformly spaced by that much (a sample grid), which
        lets a periodic steady state be copied period by period instead of evaluated.
        """
        if t_end < self.t:
            raise ValueError(f"t_end: {t_end!r} is before the medium's time {self.t!r}")
        pieces: list[Piece] = []
        orbit_from = math.inf
        while self.t < t_end and self._orbit is None:
            if self._piece is None:
                self._piece = self._next_piece()
            p = self._piece
            pieces.append(p)
            if p.end <= t_end:
                self.t = p.end
                self._n2 = p.end_state
                self._piece = None
                self._after_piece(p)
                if self._orbit is not None:
                    orbit_from = self.t
            else:
                self.t = t_end
        if self._orbit is not None:
            orbit_from = min(orbit_from, self.t)
            self.t = max(self.t, t_end)
        if times is None:
            return None
        times = np.asarray(times, dtype=float)
        out = np.empty(times.size)
        split = (
            int(np.searchsorted(times, orbit_from, side="left")) if math.isfinite(orbit_from) else times.size
        )
        if split:
            if pieces:
                starts = np.array([p.t0 for p in pieces])
                dts = np.array([p.dt if math.isfinite(p.dt) else 1.0 for p in pieces])
                coefs_t = np.array([p.coefs for p in pieces]).T
                out[:split] = evaluate_pieces(starts, dts, coefs_t, times[:split])
            else:
                out[:split] = self.mean()
        if split < times.size:
            assert self._orbit is not None
            out[split:] = self._orbit.mean_at(times[split:], step)
        return out

    # -- step planning ---------------------------------------------------------------------------
    def _next_piece(self) -> Piece:
        t = self.t
        if self._segment is None or self._segment[0] <= t:
            was_edge = self._segment is None or self._segment[2]
            self._segment = self.drive.segment(t)
            if was_edge:
                self._proxy_gap = None  # new inputs: the last step says nothing about them
        t_next, inputs, _ = self._segment
        remaining = t_next - t
        medium = self.medium
        n2 = self._n2
        # the exact steady test costs a step's worth of work: only try it at the start of a
        # segment or once the last step ended close to its own steady state
        maybe_steady = self._proxy_gap is None or self._proxy_gap <= 100.0 * STEADY_TOLERANCE
        if maybe_steady and medium.steady_gap(n2, inputs) <= STEADY_TOLERANCE:
            piece = medium.constant_piece(t, remaining, n2)
            piece.end = t_next
            return piece
        dt = self.model_step * (2.0 ** min(self._growth, 60))
        dt = min(dt, self.max_step, MAX_K_DT / medium.max_rate(inputs), self._controlled)
        dt = max(dt, self.model_step / 1024.0)  # the error control never stalls time
        self._growth += 1
        if dt >= remaining:
            piece = medium.step(t, n2, inputs, remaining)
            piece.end = t_next
        else:
            piece = medium.step(t, n2, inputs, dt)
        self.steps += 1
        return piece

    def _after_piece(self, piece: Piece) -> None:
        t = self.t
        if not piece.constant:
            self._proxy_gap = float(np.max(np.abs(self._n2 - piece.n2ss))) / self.medium.n_total
            # the predictor-corrector difference grows as dt^2: aim it at STEP_TOLERANCE
            if piece.error > 0.0:
                factor = 0.9 * math.sqrt(STEP_TOLERANCE / piece.error)
                self._controlled = piece.dt * min(2.0, max(0.25, factor))
            else:
                self._controlled = math.inf
        seg = self._segment
        if seg is not None and t >= seg[0]:
            if seg[2]:
                self._growth = 0  # an edge: restart from the short step
            self._segment = None
        if self._period is None and not self.drive.envelope.ramping_at(t):
            self._period = self.drive.periodic(t) or False
        if not self._period:
            return
        period, t_ref = self._period  # type: ignore[misc]
        if self._boundary is not None:
            self._boundary_pieces.append(piece)
        m = round((t - t_ref) / period)
        if abs(t - (t_ref + m * period)) > 1e-9 * period:
            return
        if self._boundary is not None and m == self._boundary[0] + 1:
            gap = float(np.max(np.abs(self._n2 - self._boundary[1]))) / self.medium.n_total
            if gap <= STEADY_TOLERANCE:
                self._orbit = _Orbit(t_ref + (m - 1) * period, period, self._boundary_pieces)
                return
        self._boundary = (m, self._n2.copy())
        self._boundary_pieces = []
