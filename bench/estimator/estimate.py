"""The online estimator: blocks of detector samples in, gain and inversion estimates out.

Everything that affects the estimator's state lives in this file. The estimator is streaming in
the state-in/state-out style of ``scipy.signal.sosfilt``: `update` is a pure function of
``(state, block)`` returning ``(new_state, estimates)``; states are frozen and never changed
in place, so replaying a stored run gives exactly the live figures. No I/O happens here.

Usage::

    params = EstimatorParams.from_config(cfg)
    dark = capture_dark(dark_blocks)                 # probe blocked
    baseline = capture_baseline(off_blocks, dark)    # pump off
    state = with_baseline(with_dark(new_state(params, "watch", {"pump_power": 4.0}), dark), baseline)
    for block in detector_blocks:
        state, estimates = update(state, block)
    final = report(state)

Signals. Per sample the normalised transmission is ``S = (V_probe - dark_p) / (V_ref - dark_r)``
and the pump is *on* where the ``pump_monitor`` channel is above the threshold of
`EstimatorParams.pump_threshold`. A change of that on/off state is a *pump edge*; samples within
``settle_time`` of a pump edge (and within ``step_settle_time`` of a setting change, a gap in
the sample index or the first sample of the stream) are not used. In watch mode (and sweeps
measured as in watch) a pump edge also waits ``step_settle_time``: there the driver switches
the pump on with a soft-start ramp. In chopped and decay modes the pump-on part of a
half-period is used from `EstimatorParams.rise_settle` (at the ``pump_power`` setting) after
its edge and, in chopped mode, the pump-off part from `EstimatorParams.off_settle`; a pump-on
part whose mean pump-monitor reading differs from the previous one's (a soft-start ramp) is
not used. ``ln R = ln(S_on / S_off)``.

Modes (`MODES`):

``watch``
    Steady pump, ``S_off`` the stored baseline. Samples are grouped into batches on a fixed grid
    of the sample index (``window / batches_per_window`` long); the noise of the mean is the
    scatter of the batch means (batch means: honest under noise correlated on time scales
    shorter than a batch), never the per-sample standard deviation over sqrt(N).
``chopped``
    Modulated pump. The settled part of each half-period gives a mean ``S`` (see above);
    each off/on/off triple gives ``ln R = ln(S_on / S_off)`` with
    ``S_off`` the two neighbouring off levels interpolated linearly to the time of the on level
    (for a 50 % duty cycle: their mean). This cancels a linear drift of the transmission. The
    small residual of the gain decay left in an off level, ``A exp(-t / tau)`` (below 1e-5 of
    ln R with the default off settle), is corrected with the nominal tau, the edge taken half a
    sample before the first off sample; what that leaves unknown (the edge anywhere in its
    sample interval, tau to ``u_tau``) is a systematic part of ln R.
    Cumulative: mean over cycles; its noise counts the off level that neighbouring cycles
    share (`_chopped_noise`) and the dark's standard error (`_dark_noise`). The stored
    baseline is not needed; if present, it is compared with the pump-off level
    (``baseline_stale``).
``decay``
    After each on->off edge, ``ln R(t) = ln(S(t) / S_off)`` with ``S_off`` the late tail of the
    same decay or the stored baseline (`EstimatorParams.decay_reference`). The edge is taken
    half a sample before the first pump-off sample. Bins on the sample grid average ``ln S``
    (a bin mean of ``S`` would bend the exponential), are averaged over decays and fitted with
    ``ln R(0) exp(-t / tau)`` (`bench.physics.fitting.fit_exponential_decay`: weights from the
    within-bin scatter or the counts, covariance scaled by the reduced chi-square). The gain
    still left in a late tail, ``ln R(0) rho(tau)``, is put back iteratively; the reference's
    own noise is propagated through the fit's sensitivity to an offset. ``ln R(0)`` is the
    settled pump-on level before each decay less its ``S_off`` (`_decay_level`: no edge
    position needed); only when no on part settles is it the fitted amplitude, whose unknown
    edge position within a sample interval (uniform) is then a systematic part. The fitted
    decay time is corrected for the probe's own stimulated rate to give ``tau_s``.
``sweep``
    Pump-power or probe-wavelength steps, announced with `with_setting` (or by a pump block's
    ``pump_setpoint`` / a wavelength block's ``probe_wavelength`` channel). Each step is measured
    as in ``watch`` (or ``chopped`` with the setting ``method="chopped"``); the step points are
    fitted with the pump saturation form (`bench.physics.fitting.fit_saturation`; over an optically
    thick sample, `bench.physics.fitting.thick_sample_fraction`, with the configured pump absorbance
    whose uncertainty enters the fit parameters' systematic parts) and, over wavelength, the
    pump-induced gain change ``ln R / L`` with a Voigt line in optical frequency
    (`bench.physics.fitting.fit_voigt`) plus a McCumber check when a cross-section spectrum and the
    zero-line energy are configured. The points' ``beta`` is absolute (see Figures); the fit
    takes the probe-held part ``beta_off`` off first and undoes the probe's stimulated rate
    ``W_s``, which stretches the fitted saturation power by ``1 + tau W_s`` (the same rate as
    the decay mode's correction; `_saturation_fit`). Extras: ``points`` (each with its span
    ``t_start``/``t_end`` on the run clock), ``fits`` (with the fitted curve). A sweep's last
    step is closed by `report` (the consumer calls it when the stream ends).

Emission. Time is cut into windows of ``window`` seconds on the sample-index grid. When the
first sample after a window has been processed, the estimator emits that window's estimate
(scope ``"window"``) and the cumulative estimate as of the window's end (scope
``"cumulative"``: everything since the mode, the dark or a setting last changed). A window
estimate holds the batches (watch, sweep), the cycles (chopped) or the decays (decay) that
finished inside the window: one per cycle or decay when the modulation period is a window or
longer, and a few estimates per second rather than thousands at fast chopping. Windows that saw
no samples (a gap) emit nothing. `report` gives the cumulative estimate of everything so far.

Gaps. A block that starts later than the previous one ended (lost samples) restarts the
settle time, as a pump edge would, and ends the open segment or decay without using it.

Determinism. The batch, segment, decay and window grids are fixed by the sample index, so
feeding the same samples in blocks of any size gives the same estimates, equal to rounding
(about 1e-12 relative; the tests require 1e-9): in every mode, for every emitted estimate and
for `report`. Only the order of floating-point additions within one batch or bin can differ.
Fitted figures (decay, sweep fits) inherit that agreement as long as the fit converges to a
well-defined optimum (tolerances 1e-12); a saturation model far from the points amplifies
rounding to about 1e-8. Setting changes must arrive at the same sample positions (between the
same two samples), as they do on replay.

Figures (`figures`). ``ln R`` is the pump-induced change from the baseline, which already
holds the excitation the probe alone keeps up, ``beta_off = sigma_a Phi_s / ((sigma_a +
sigma_e) Phi_s + 1/tau)`` (`probe_terms`; about 5e-5 on the demo bench). It is added back:
``beta`` (``N2 / N_total``) and ``n2_per_m3`` are absolute, and the gain figures are those of the
pumped sample, ``ln G = ln R + (sigma_e + sigma_a) L N beta_off - sigma_a N L = g L``. The
pump-induced change itself is in the watch estimates' and the sweep points' ``beta_change``
(with ``beta_probe_held``).

Uncertainty model (every figure is a `bench.records.Quantity`):

* ``sigma_noise``: the statistical part described per mode, propagated linearly; the
  baseline's standard error is added in quadrature where the baseline is used. The dark's
  standard error is added in chopped and decay modes (`_dark_noise`: it moves ln R by
  ``d_p (1 / S_off - 1 / S_on) / V_ref``, first order in ln R); elsewhere it is neglected.
* ``sigma_systematic``: from the configured standard uncertainties of the length ``L``
  (absolute), the density ``N`` (relative) and each cross-section (relative, ``u_sigma``,
  ``sigma_e`` and ``sigma_a`` independent), propagated linearly and assumed independent:
  for the pump-induced ``ln R / ((sigma_e + sigma_a) L N)`` of beta the relative part is
  ``sqrt(u_sum^2 + (u_L / L)^2 + u_N^2)`` with ``u_sum = u_sigma sqrt(sigma_e^2 + sigma_a^2)
  / (sigma_e + sigma_a)``; ``n2`` drops ``u_N``; ``ln G = ln R - sigma_a N L`` carries
  ``sigma_a N L sqrt(u_sigma^2 + u_N^2 + (u_L / L)^2)``; ``g = ln R / L - sigma_a N`` carries
  ``sqrt((ln R u_L / L^2)^2 + (sigma_a N)^2 (u_sigma^2 + u_N^2))``. ``ln_ratio`` is measured
  directly and has no configured systematic part; ``tau_s`` has only that of its correction for
  the probe's own stimulated rate, ``tau^2 (sigma_e + sigma_a) Phi_s u_sum`` (the probe power
  and beam size carry no configured uncertainty). ``beta_off`` adds a systematic part from the
  cross-sections and the lifetime's configured uncertainty ``u_tau`` (`_held_sys`).
* ``sigma``: the two parts in quadrature.

Flags (`bench.records.FLAGS`): ``probe_not_weak`` (``I/I_sat`` or ``F/F_sat`` above
``weak_fraction``, ``I`` the probe's power-weighted mean intensity, half its peak; pulsed probes are then corrected with Frantz-Nodvik), ``near_full_scale``
(a sample behind the estimate above ``full_scale_fraction`` of the range), ``baseline_stale``
(older than ``baseline_max_age``, or in chopped mode the pump-off level differs from it by more
than ``baseline_drift_k`` sigma), ``low_snr`` (``|ln R| < snr_min sigma_noise``, or fewer than
``min_batches`` batches / cycles / decays behind the noise figure), ``not_settled`` (pump-on
samples inside the settle time in the window, or no settled data at all), ``no_baseline``
(a figure needs the stored baseline and there is none; the estimate then has no values),
``no_dark`` (no dark captured: zero volts assumed).

References
----------
.. [1] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4
   (quasi-three-level gain and inversion).
.. [2] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
   J. Chem. Phys. 91, 461 (1989) (batch / blocking estimates of the error of a mean).
.. [3] JCGM 100:2008, *Evaluation of measurement data - Guide to the expression of uncertainty
   in measurement* (GUM), sec. 5.1 (linear propagation of uncorrelated uncertainties).
.. [4] L. M. Frantz and J. S. Nodvik, "Theory of pulse propagation in a laser amplifier",
   J. Appl. Phys. 34, 2346 (1963).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
from scipy import constants

from bench import physics
from bench.physics import fitting
from bench.errors import GainbenchError
from bench.estimator.params import EstimatorParams
from bench.records import (
    PROBE,
    PUMP_MONITOR,
    PUMP_SETPOINT,
    REFERENCE,
    WAVELENGTH,
    Block,
    Estimate,
    Quantity,
)

__all__ = [
    "MODES",
    "SETTINGS",
    "Dark",
    "Baseline",
    "EstimatorParams",
    "EstimatorState",
    "capture_dark",
    "capture_baseline",
    "new_state",
    "with_dark",
    "with_baseline",
    "with_setting",
    "update",
    "report",
    "figures",
    "probe_terms",
    "pump_induced",
    "pulsed_small_signal_ln_ratio",
]

MODES = ("watch", "chopped", "decay", "sweep")

#: Settings a state may carry: pump power (W) or current (A), probe wavelength (m), and for
#: sweeps the way each step is measured (``"watch"`` or ``"chopped"``).
SETTINGS = ("pump_power", "pump_current", "probe_wavelength", "method")

_EMPTY: Mapping[str, Any] = MappingProxyType({})


# ============================================================================================
# procedures: dark and baseline
# ============================================================================================


@dataclass(frozen=True)
class Dark:
    """Detector readings with the probe blocked (V), with their standard errors.

    ``t`` is the run-clock time of the last sample used.
    """

    probe: float
    probe_sigma: float
    reference: float
    reference_sigma: float
    n_samples: int
    t: float


@dataclass(frozen=True)
class Baseline:
    """Pump-off normalised transmission ``S_off`` and its standard error.

    ``t`` is the run-clock time of the last sample used (its age is measured from there),
    ``t_start`` that of the first.
    """

    value: float
    sigma: float
    n_samples: int
    t: float
    t_start: float


def _columns(blocks: Iterable[Block], names: tuple[str, ...], what: str):
    parts: dict[str, list[np.ndarray]] = {n: [] for n in names}
    t_first = t_last = None
    for block in blocks:
        if not isinstance(block, Block):
            raise ValueError(f"blocks: expected Block objects, got {type(block).__name__}")
        if block.n == 0:
            continue
        for n in names:
            if n not in block.channels:
                raise ValueError(f"blocks: block {block.seq} from {block.source} has no {n!r} channel for the {what}")
            parts[n].append(block.column(n))
        t_first = block.t0 if t_first is None else t_first
        t_last = block.t_end
    if t_first is None:
        raise ValueError(f"blocks: no samples to take the {what} from")
    return {n: np.concatenate(v) for n, v in parts.items()}, float(t_first), float(t_last)


def _mean_and_error(x: np.ndarray, batches: int) -> tuple[float, float]:
    """Mean of a time series and its standard error from ``batches`` contiguous batch means."""
    n = x.size
    k = min(batches, n)
    if k < 2:
        raise ValueError(f"blocks: need at least 2 samples, got {n}")
    edges = (np.arange(k + 1) * n) // k
    sums = np.add.reduceat(x, edges[:-1])
    counts = np.diff(edges).astype(np.float64)
    mean = float(np.sum(sums) / n)
    dev = sums / counts - mean
    var = float(np.sum(counts**2 * dev**2)) / n**2 * k / (k - 1)
    return mean, math.sqrt(var)


def capture_dark(blocks: Iterable[Block], *, batches: int = 20) -> Dark:
    """Dark levels from blocks taken with the probe blocked.

    The standard errors come from the scatter of ``batches`` contiguous batch means.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    """
    if not (isinstance(batches, int) and batches >= 2):
        raise ValueError(f"batches: must be a whole number of at least 2, got {batches!r}")
    cols, _, t_last = _columns(blocks, (PROBE, REFERENCE), "dark")
    p, sp = _mean_and_error(cols[PROBE], batches)
    r, sr = _mean_and_error(cols[REFERENCE], batches)
    return Dark(p, sp, r, sr, int(cols[PROBE].size), t_last)


def capture_baseline(blocks: Iterable[Block], dark: Dark | None = None, *, batches: int = 20,
                     pump_threshold_v: float | None = None) -> Baseline:
    """Pump-off baseline ``S_off = (V_probe - dark_p) / (V_ref - dark_r)`` from blocks.

    Parameters
    ----------
    blocks : iterable of Block
        Detector blocks taken with the pump off.
    dark : Dark, optional
        Subtracted from every sample (zero volts if None).
    batches : int, optional
        Number of contiguous batches for the standard error (default 20).
    pump_threshold_v : float, optional
        If given, samples whose ``pump_monitor`` is above it are left out.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989).
    """
    if not (isinstance(batches, int) and batches >= 2):
        raise ValueError(f"batches: must be a whole number of at least 2, got {batches!r}")
    blocks = list(blocks)
    names = (PROBE, REFERENCE) + ((PUMP_MONITOR,) if pump_threshold_v is not None else ())
    cols, t_first, t_last = _columns(blocks, names, "baseline")
    dp, dr = (dark.probe, dark.reference) if dark is not None else (0.0, 0.0)
    den = cols[REFERENCE] - dr
    if np.any(den <= 0):
        raise ValueError("blocks: the reference is at or below its dark level; no baseline can be taken")
    s = (cols[PROBE] - dp) / den
    if pump_threshold_v is not None:
        s = s[cols[PUMP_MONITOR] <= pump_threshold_v]
    m, sm = _mean_and_error(s, batches)
    if not m > 0:
        raise ValueError("blocks: the probe is at or below its dark level; no baseline can be taken")
    return Baseline(m, sm, int(s.size), t_last, t_first)


# ============================================================================================
# accumulators (frozen; `add` returns a new one)
# ============================================================================================


@dataclass(frozen=True)
class _BatchStats:
    """Weighted batch means: mean of the samples and its error from the batch scatter.

    Values are kept relative to ``shift`` (the first batch mean) so that the sums of squares
    do not lose precision.
    """

    k: int = 0
    n: float = 0.0
    shift: float = 0.0
    s1: float = 0.0  # sum n_b d_b
    s2: float = 0.0  # sum n_b^2 d_b^2
    s3: float = 0.0  # sum n_b^2 d_b
    s4: float = 0.0  # sum n_b^2

    def add(self, n_b: float, mean_b: float) -> _BatchStats:
        shift = mean_b if self.k == 0 else self.shift
        d = mean_b - shift
        return _BatchStats(self.k + 1, self.n + n_b, shift, self.s1 + n_b * d, self.s2 + n_b * n_b * d * d,
                           self.s3 + n_b * n_b * d, self.s4 + n_b * n_b)

    def mean_error(self) -> tuple[float, float]:
        if self.k == 0:
            return math.nan, math.nan
        dm = self.s1 / self.n
        if self.k < 2:
            return self.shift + dm, math.nan
        ss = max(self.s2 - 2.0 * dm * self.s3 + dm * dm * self.s4, 0.0)
        return self.shift + dm, math.sqrt(ss / self.n**2 * self.k / (self.k - 1))


@dataclass(frozen=True)
class _ScalarStats:
    """Mean and standard error of a list of values (cycles, segment levels)."""

    k: int = 0
    shift: float = 0.0
    s1: float = 0.0
    s2: float = 0.0
    n_samples: float = 0.0

    def add(self, x: float, n_samples: float = 0.0) -> _ScalarStats:
        shift = x if self.k == 0 else self.shift
        d = x - shift
        return _ScalarStats(self.k + 1, shift, self.s1 + d, self.s2 + d * d, self.n_samples + n_samples)

    def mean(self) -> float:
        return self.shift + self.s1 / self.k if self.k else math.nan

    def std(self) -> float:
        if self.k < 2:
            return math.nan
        dm = self.s1 / self.k
        return math.sqrt(max(self.s2 - self.k * dm * dm, 0.0) / (self.k - 1))

    def error(self) -> float:
        return self.std() / math.sqrt(self.k) if self.k >= 2 else math.nan


@dataclass(frozen=True, eq=False)
class _CurveStats:
    """Sums over decays of binned ln R(t) curves (all arrays of length n_bins)."""

    n_decays: int
    count: np.ndarray  # samples per bin, summed over decays
    w_y: np.ndarray  # sum of count * ln R
    w_y2: np.ndarray  # sum of count * ln R^2 (kept for the spread between decays)
    ss: np.ndarray  # sum of within-bin squared deviations of ln S
    dof: np.ndarray  # sum of (count - 1)
    ref_var: float  # sum of the variances of each decay's own ln S_off (tails)
    ref_common: float  # variance of a ln S_off shared by all decays (stored baseline)
    n_samples: float
    tails: tuple[tuple[int, int], ...] = ()  # (tail samples, decays) of the decays that used a tail
    level: _ScalarStats = _ScalarStats()  # per decay: settled pump-on ln S before it less its ln S_off
    level_var: float = 0.0  # sum over those decays of the variance of each value (within-scatter)
    level_tails: tuple[tuple[int, int], ...] = ()  # as `tails`, for the decays in `level`
    level_ln_off: float = 0.0  # sum over those decays of their ln S_off

    @classmethod
    def empty(cls, n_bins: int) -> _CurveStats:
        z = np.zeros(n_bins)
        return cls(0, z, z, z, z, z, 0.0, 0.0, 0.0)

    def add(self, d: _Decay) -> _CurveStats:
        c = d.count
        y = np.where(c > 0, d.ln_ratio, 0.0)
        tails = dict(self.tails)
        tails[d.tail_n] = tails.get(d.tail_n, 0) + 1
        level, level_var, level_tails = self.level, self.level_var, self.level_tails
        level_ln_off = self.level_ln_off
        if d.on_n > 0:
            level = level.add(d.on_level, d.on_n)
            level_ln_off += d.ln_off
            level_var += d.on_var + (0.0 if d.reference == "baseline" else d.ref_var)
            lt = dict(level_tails)
            lt[d.tail_n] = lt.get(d.tail_n, 0) + 1
            level_tails = tuple(sorted(lt.items()))
        return _CurveStats(
            self.n_decays + 1,
            self.count + c,
            self.w_y + c * y,
            self.w_y2 + c * y * y,
            self.ss + d.ss,
            self.dof + np.maximum(c - 1.0, 0.0),
            self.ref_var + (0.0 if d.reference == "baseline" else d.ref_var),
            d.ref_var if d.reference == "baseline" else self.ref_common,
            self.n_samples + d.n_samples,
            tuple(sorted(tails.items())),
            level, level_var, level_tails, level_ln_off,
        )

    def tail_residual(self, tail0: int, dt: float, tau: float, of_levels: bool = False) -> float:
        """Mean over decays (those with an on level if ``of_levels``) of the gain left in the
        tail, as a fraction of ln R(0) (zero for decays referred to the stored baseline)."""
        tails, n = (self.level_tails, self.level.k) if of_levels else (self.tails, self.n_decays)
        if n == 0:
            return 0.0
        total = sum(k * _residual_mean(tail0, m, dt, tau) for m, k in tails if m > 0)
        return total / n


@dataclass(frozen=True, eq=False)
class _Decay:
    """One finished decay: binned ln R and what it rests on."""

    b: int  # index of its last sample
    count: np.ndarray
    ln_ratio: np.ndarray  # mean of ln(S / S_off) per bin
    ss: np.ndarray  # within-bin sum of squared deviations of ln S
    reference: str  # "tail" or "baseline"
    ref_var: float  # variance of ln S_off
    n_samples: float
    tail_n: int  # samples in the tail used as S_off (0 with the stored baseline)
    on_n: float = 0.0  # settled pump-on samples just before the edge
    on_level: float = math.nan  # their mean ln S less ln S_off
    on_var: float = 0.0  # variance of their mean ln S (within-scatter / n)
    ln_off: float = math.nan  # the ln S_off used


# ============================================================================================
# state
# ============================================================================================


@dataclass(frozen=True)
class _Clock:
    """The sample-index grid: index i is at ``origin + i * dt``."""

    origin: float
    dt: float
    batch: int  # samples per batch
    window: int  # samples per window (a whole number of batches)
    next_index: int  # first index not yet processed

    def time(self, index: float) -> float:
        return self.origin + index * self.dt


@dataclass(frozen=True)
class _Pump:
    on: bool = False
    last_edge: int = 0  # first index after the last pump edge (or stream start, gap)
    last_step: int = -(2**62)  # first index after the last setting change
    step_pending: bool = False  # a setting changed: the next sample starts a step
    step_time: float | None = None  # ... at this run-clock time, if later than the next sample


@dataclass(frozen=True)
class _Counts:
    """Samples seen, and flagged samples, in the open window and since the start."""

    seen: int = 0
    unsettled: int = 0
    over: int = 0
    skipped: int = 0  # cycles or decays left out (no settled part, too short, no reference)
    no_reference: int = 0

    def plus(self, other: _Counts) -> _Counts:
        return _Counts(self.seen + other.seen, self.unsettled + other.unsettled, self.over + other.over,
                       self.skipped + other.skipped, self.no_reference + other.no_reference)


@dataclass(frozen=True)
class _WatchCore:
    open_id: int = -1  # batch being filled
    open_n: float = 0.0
    open_sum: float = 0.0
    win: _BatchStats = _BatchStats()
    cum: _BatchStats = _BatchStats()


@dataclass(frozen=True)
class _Segment:
    """A stretch between pump edges: its settled part's mean S and where it sits."""

    start: int
    end: int  # last index
    on: bool
    n: float  # settled samples
    mean: float
    centre: float  # mean index of the settled samples
    residual: float  # mean exp(-t/tau) over the settled samples (t since the edge), off parts
    after_edge: bool  # starts at a real pump edge (not a stream start, gap or step)
    monitor: float = math.nan  # mean pump monitor over the settled samples
    steady: bool = True  # on parts: the pump level matches the previous on part's (no ramp)


@dataclass(frozen=True)
class _ChoppedCore:
    open_start: int = -1
    open_on: bool = False
    open_after_edge: bool = False
    open_n: float = 0.0
    open_sum: float = 0.0
    open_isum: float = 0.0
    open_msum: float = 0.0
    open_m2sum: float = 0.0
    last_on_monitor: tuple[float, float] = (math.nan, 0.0)  # last finished on segment: monitor mean, its variance
    recent: tuple[_Segment, ...] = ()  # the last two finished segments
    win: _ScalarStats = _ScalarStats()
    cum: _ScalarStats = _ScalarStats()
    win_off: _ScalarStats = _ScalarStats()
    cum_off: _ScalarStats = _ScalarStats()
    off_dsum: float = 0.0  # sum over cycles of d = ln S_off after - ln S_off before
    off_dsq: float = 0.0  # sum of d^2
    off_dn: int = 0
    warm: bool = False  # a cycle at a steady pump level has been seen since the stream (re)started
    frac_sum: float = 0.0  # sum over cycles of the interpolation weight f of the later off level
    win_corr: float = 0.0  # sum over cycles of the residual-decay correction applied (ln R)
    cum_corr: float = 0.0
    ref_sum: float = 0.0  # dark-corrected reference volts, summed over samples
    ref_n: int = 0


@dataclass(frozen=True, eq=False)
class _DecayCore:
    n_bins: int
    bin_n: int
    open_edge: int = -1
    open_sums: np.ndarray | None = None  # shape (3, n_bins + 1): counts, sum S, sum S^2
    win: _CurveStats | None = None
    cum: _CurveStats | None = None
    cum_fit: Mapping[str, Any] | None = None  # cached fit of `cum`
    # settled samples of the open on part: n, sum ln S, sum ln S^2, sum monitor, sum monitor^2
    on_open: tuple[float, float, float, float, float] = (0.0, 0.0, 0.0, 0.0, 0.0)
    on_open_after_edge: bool = False  # the open on part started at a rising edge
    last_on_monitor: tuple[float, float] = (math.nan, 0.0)  # last finished on part: monitor mean, its variance
    on_levels: tuple[tuple[int, float, float, float], ...] = ()  # (edge, n, sum, sum sq) of open decays
    ref_sum: float = 0.0  # dark-corrected reference volts, summed over samples
    ref_n: int = 0


@dataclass(frozen=True)
class _SweepCore:
    method: str
    inner: Any  # _WatchCore or _ChoppedCore of the current step
    points: tuple[Mapping[str, Any], ...] = ()
    fits: Mapping[str, Any] = field(default_factory=lambda: _EMPTY)


@dataclass(frozen=True, eq=False)
class EstimatorState:
    """Everything the estimator carries from block to block (frozen; see `update`)."""

    params: EstimatorParams
    mode: str
    settings: Mapping[str, Any]
    dark: Dark | None = None
    baseline: Baseline | None = None
    clock: _Clock | None = None
    pump: _Pump = _Pump()
    core: Any = None
    window_id: int = 0
    win_counts: _Counts = _Counts()
    cum_counts: _Counts = _Counts()


# ============================================================================================
# public state functions
# ============================================================================================


def _check_settings(settings: Mapping[str, Any] | None, mode: str) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in (settings or {}).items():
        if key not in SETTINGS:
            raise ValueError(f"settings: unknown setting {key!r} (known: {', '.join(SETTINGS)})")
        if key == "method":
            if value not in ("watch", "chopped"):
                raise ValueError(f"settings: method must be 'watch' or 'chopped', got {value!r}")
            if mode != "sweep":
                raise ValueError("settings: method applies to sweep mode only")
        elif value is not None:
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
                raise ValueError(f"settings: {key} must be a finite number, zero or positive, got {value!r}")
            if key == "probe_wavelength" and value <= 0:
                raise ValueError(f"settings: probe_wavelength must be positive, got {value!r}")
            value = float(value)
        out[key] = value
    return out


def _fresh_core(params: EstimatorParams, mode: str, settings: Mapping[str, Any], clock: _Clock | None):
    if mode == "watch":
        return _WatchCore()
    if mode == "chopped":
        return _ChoppedCore()
    if mode == "decay":
        if clock is None:
            return None  # built when the first block gives the sample interval
        bin_n = max(1, int(round(params.decay_bin / clock.dt)))
        n_bins = max(3, int(math.ceil(params.decay_fit_span / (bin_n * clock.dt))))
        return _DecayCore(n_bins=n_bins, bin_n=bin_n, win=_CurveStats.empty(n_bins), cum=_CurveStats.empty(n_bins))
    method = settings.get("method", "watch")
    return _SweepCore(method=method, inner=_WatchCore() if method == "watch" else _ChoppedCore())


def new_state(params: EstimatorParams, mode: str, settings: Mapping[str, Any] | None = None) -> EstimatorState:
    """A fresh estimator for ``mode`` (one of `MODES`) with optional `SETTINGS`."""
    if not isinstance(params, EstimatorParams):
        raise ValueError(f"params: expected EstimatorParams, got {type(params).__name__}")
    if mode not in MODES:
        raise ValueError(f"mode: {mode!r} is not one of {', '.join(MODES)}")
    s = _check_settings(settings, mode)
    return EstimatorState(params=params, mode=mode, settings=MappingProxyType(s),
                          core=_fresh_core(params, mode, s, None))


def _restart(state: EstimatorState, *, settle: bool = True, **changes: Any) -> EstimatorState:
    """Same stream, fresh accumulators (a new 'cumulative' scope) from the next sample on.

    With ``settle`` the next sample also starts a step: ``step_settle_time`` passes before
    samples count again (a setting changed on the bench)."""
    st = dataclasses.replace(state, **changes)
    pump = dataclasses.replace(st.pump, step_pending=True) if settle else st.pump
    core = st.core
    if st.mode == "sweep" and isinstance(core, _SweepCore):
        core = dataclasses.replace(core, inner=_WatchCore() if core.method == "watch" else _ChoppedCore())
    else:
        core = _fresh_core(st.params, st.mode, st.settings, st.clock)
    return dataclasses.replace(st, pump=pump, core=core, win_counts=_Counts(), cum_counts=_Counts())


def with_dark(state: EstimatorState, dark: Dark | None) -> EstimatorState:
    """Use ``dark`` from now on. The accumulators restart (S means something else now)."""
    if dark is not None and not isinstance(dark, Dark):
        raise ValueError(f"dark: expected Dark, got {type(dark).__name__}")
    if state.mode == "sweep":
        st = _close_step(state)
        return _restart(st, settle=False, dark=dark)
    return _restart(state, settle=False, dark=dark)


def with_baseline(state: EstimatorState, baseline: Baseline | None) -> EstimatorState:
    """Use ``baseline`` for estimates from now on (watch estimates use it when emitted)."""
    if baseline is not None and not isinstance(baseline, Baseline):
        raise ValueError(f"baseline: expected Baseline, got {type(baseline).__name__}")
    return dataclasses.replace(state, baseline=baseline)


def with_setting(state: EstimatorState, *, t: float | None = None, **settings: Any) -> EstimatorState:
    """Announce a setting change (pump power or current, probe wavelength).

    A change starts a new cumulative scope from the next sample, with ``step_settle_time``
    before samples count again; in sweep mode it also closes the current step and adds its
    point. Settings equal to the current ones change nothing.

    ``t`` (run clock, s) is when the setting changed on the bench, if known: the step's
    ``step_settle_time`` then runs from ``t`` when that is later than the next sample (a
    setting applied before the block that holds ``t``), so where the new step starts does not
    depend on how the samples are cut into blocks.
    """
    if t is not None and not (isinstance(t, (int, float)) and math.isfinite(t)):
        raise ValueError(f"t: must be a finite time in s or None, got {t!r}")
    new = _check_settings(settings, state.mode)
    if "method" in new:
        raise ValueError("settings: method can only be given to new_state")
    merged = dict(state.settings)
    merged.update(new)
    if "pump_current" in new and "pump_power" not in new and new["pump_current"] is not None:
        merged["pump_power"] = state.params.pump_power_at(new["pump_current"])
    if merged == dict(state.settings):
        return state
    st = _close_step(state) if state.mode == "sweep" else state
    st = _restart(st, settings=MappingProxyType(merged))
    return dataclasses.replace(st, pump=dataclasses.replace(st.pump, step_time=None if t is None else float(t)))


# ============================================================================================
# per-block preprocessing
# ============================================================================================


@dataclass(eq=False)
class _Frame:
    i0: int
    n: int
    s: np.ndarray
    on: np.ndarray
    change: np.ndarray  # pump edge at this sample
    settled: np.ndarray
    edges: np.ndarray  # local indices of pump edges
    start_is_edge: bool  # sample 0 starts a segment (stream start, gap or step)
    over: np.ndarray | None  # samples near full scale (None: none in this block)
    ref_sum: float = 0.0  # sum of the dark-corrected reference volts (for the dark's share of sigma)
    monitor: np.ndarray | None = None  # the pump monitor volts


def _watch_like(state: EstimatorState) -> bool:
    return state.mode == "watch" or (state.mode == "sweep" and state.settings.get("method", "watch") == "watch")


def _new_clock(params: EstimatorParams, t0: float, dt: float) -> _Clock:
    batch = max(1, int(round(params.window / params.batches_per_window / dt)))
    return _Clock(origin=t0, dt=dt, batch=batch, window=batch * params.batches_per_window, next_index=0)


def _frame(state: EstimatorState, block: Block) -> tuple[_Frame | None, _Clock, _Pump]:
    p = state.params
    for name in (PROBE, REFERENCE, PUMP_MONITOR):
        if name not in block.channels:
            raise ValueError(f"block: block {block.seq} from {block.source} has no {name!r} channel "
                             f"(has {', '.join(block.channels)})")
    n = block.n
    clock = state.clock
    if n == 0:
        return None, clock, state.pump  # type: ignore[return-value]
    dt = block.dt if block.dt > 0 else (clock.dt if clock is not None else 0.0)
    if not dt > 0:
        raise ValueError(f"block: block {block.seq} has no sample interval (dt = 0) and none is known yet")
    first = clock is None
    if first:
        clock = _new_clock(p, block.t0, dt)
        i0 = 0
    else:
        if abs(dt - clock.dt) > 1e-6 * clock.dt:
            raise ValueError(f"block: block {block.seq} has dt = {dt!r} s but the stream has {clock.dt!r} s; "
                             "start a new estimator state when the sample rate changes")
        i0 = int(round((block.t0 - clock.origin) / clock.dt))
        if i0 < clock.next_index:
            raise ValueError(f"block: block {block.seq} starts at sample {i0} but samples up to "
                             f"{clock.next_index - 1} were already processed (repeated or out of order)")
    gap = (not first) and i0 > clock.next_index
    clock = dataclasses.replace(clock, next_index=i0 + n)

    vp = block.column(PROBE)
    vr = block.column(REFERENCE)
    vm = block.column(PUMP_MONITOR)
    with np.errstate(divide="ignore", invalid="ignore"):  # a blocked reference reads ~0 V: S is then inf/nan
        if state.dark is not None:
            s = (vp - state.dark.probe) / (vr - state.dark.reference)
        else:
            s = vp / vr
    thr = p.pump_threshold(state.settings.get("pump_power"))
    on = vm > thr

    pump = state.pump
    change = np.empty(n, dtype=bool)
    change[1:] = on[1:] != on[:-1]
    restart = first or gap
    if restart:
        change[0] = False
    else:
        change[0] = bool(on[0]) != pump.on
    edges = np.flatnonzero(change)
    last_edge = i0 if restart else pump.last_edge
    last_step = i0 if pump.step_pending else pump.last_step
    if pump.step_pending and pump.step_time is not None:
        last_step = max(i0, int(math.ceil((pump.step_time - clock.origin) / clock.dt - 1e-9)))
    step_n = int(math.ceil(p.step_settle_time / clock.dt - 1e-9))
    if _watch_like(state):
        # the driver switches the pump on with a soft-start ramp: an edge counts as a step
        settle_n = rise_n = step_n
    else:
        rise_n = int(math.ceil(p.rise_settle(state.settings.get("pump_power")) / clock.dt - 1e-9))
        off_settle = p.off_settle() if state.mode != "decay" else p.settle_time
        settle_n = int(math.ceil(off_settle / clock.dt - 1e-9))
    local = np.arange(n)
    if edges.size == 0:
        settled = local >= (last_edge + (rise_n if on[0] else settle_n) - i0)
    else:
        marks = np.where(change, local, last_edge - i0)
        np.maximum.accumulate(marks, out=marks)
        since = local - marks
        settled = since >= (np.where(on, rise_n, settle_n) if rise_n != settle_n else settle_n)
    if last_step + step_n > i0:
        settled &= local >= (last_step + step_n - i0)

    over = None
    if p.detector_range is not None:
        lim = p.full_scale_fraction * p.detector_range
        if max(vp.max(), -vp.min(), vr.max(), -vr.min()) > lim:
            over = (np.abs(vp) > lim) | (np.abs(vr) > lim)

    new_pump = _Pump(
        on=bool(on[-1]),
        last_edge=(i0 + int(edges[-1])) if edges.size else last_edge,
        last_step=last_step,
        step_pending=False,
    )
    ref = vr - state.dark.reference if state.dark is not None else vr
    frame = _Frame(i0=i0, n=n, s=s, on=on, change=change, settled=settled, edges=edges,
                   start_is_edge=restart or pump.step_pending, over=over, ref_sum=float(np.sum(ref)),
                   monitor=vm)
    return frame, clock, new_pump


# ============================================================================================
# figures
# ============================================================================================


def _q(value: float, noise: float, sys: float = 0.0) -> Quantity:
    return Quantity(float(value), float(math.hypot(noise, sys)), float(noise), float(sys))


_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(24)


def _beam_energy_gain(g0: float, f_peak: float, f_sat: float) -> float:
    """Energy gain of a Gaussian-profile pulse (peak fluence ``f_peak``) through a Frantz-Nodvik
    amplifier of small-signal gain ``g0``: the local fluence gain averaged over
    ``u = F / F_peak`` in (0, 1] (the Gaussian profile makes ``dE = (pi w^2 / 2) F_peak du``)."""
    u = 0.5 * (_GL_NODES + 1.0)
    f_in = f_peak * u
    f_out = physics.frantz_nodvik_output(f_in, f_sat, g0)
    return float(0.5 * np.sum(_GL_WEIGHTS * f_out / f_in))


def pulsed_small_signal_ln_ratio(ln_ratio: float, params: EstimatorParams, sigma_e: float, sigma_a: float,
                                 wavelength: float | None = None) -> float:
    """Small-signal ln R from the ln R measured with a pulsed probe of the configured energy.

    Both the pumped and the unpumped transmission of a pulse follow Frantz-Nodvik; for a
    Gaussian beam the measured energy gain is the local gain averaged over the profile
    (`_beam_energy_gain`). The unpumped small-signal transmission ``T0 = exp(-sigma_a N L)``
    gives the measured unpumped energy transmission ``T_m``; the pumped energy gain is then
    ``R T_m``, which is inverted (Brent's method) for the pumped small-signal gain ``G0``, and
    ``ln R0 = ln G0 - ln T0``.

    References
    ----------
    .. [1] L. M. Frantz and J. S. Nodvik, J. Appl. Phys. 34, 2346 (1963).
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 10.3 (pulse
       amplification) and sec. 17.1 (Gaussian beam profile).
    """
    from scipy.optimize import brentq

    lam = params.probe_wavelength if wavelength is None else wavelength
    f_sat = float(physics.saturation_fluence(lam, sigma_e, sigma_a))
    f_peak = params.probe_peak
    if not f_peak > 0:
        return float(ln_ratio)
    ln_t0 = -sigma_a * params.n_total * params.length
    t_meas = _beam_energy_gain(math.exp(ln_t0), f_peak, f_sat)
    target = math.exp(ln_ratio) * t_meas

    def gap(ln_g0: float) -> float:
        return math.log(_beam_energy_gain(math.exp(ln_g0), f_peak, f_sat)) - math.log(target)

    lo, hi = -50.0, 50.0
    if gap(lo) > 0 or gap(hi) < 0:
        raise ValueError("ln_ratio: no small-signal gain reproduces this pulsed measurement")
    ln_g0 = brentq(gap, lo, hi, xtol=1e-13, rtol=1e-14)
    return float(ln_g0 - ln_t0)


def probe_terms(params: EstimatorParams, wavelength: float | None = None) -> tuple[float, float, float]:
    """(photon flux, stimulated rate, held fraction) of the probe alone, at ``wavelength``.

    The flux is the probe's photon flux weighted by its own Gaussian profile,
    ``P / (pi w^2) / (h nu)`` (half the on-axis value; the one definition gainbench uses for the
    probe's intensity, see `EstimatorParams.probe_saturation`); the stimulated rate
    ``W_s = (sigma_e + sigma_a) Phi_s`` is what it adds to the relaxation rate ``1/tau``; the
    held fraction ``beta_off`` (`bench.physics.probe_held_fraction`) is the excitation it keeps up
    with the pump off, which the baseline already holds. Pulsed probes: all zero (their mean
    stimulated rate is negligible); unknown cross-sections: zero as well.

    References
    ----------
    .. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (rate equations).
    .. [2] A. E. Siegman, *Lasers*, University Science Books, 1986, sec. 17.1 (Gaussian beams).
    """
    xs = params.cross_sections_at(wavelength)
    if params.probe_kind != "cw" or xs is None or not params.probe_peak > 0:
        return 0.0, 0.0, 0.0
    lam = params.probe_wavelength if wavelength is None else wavelength
    se, sa = xs
    flux = float(physics.photon_flux(params.probe_mean, lam))
    return flux, (se + sa) * flux, float(physics.probe_held_fraction(flux, se, sa, params.tau))


def _held_sys(params: EstimatorParams, wavelength: float | None, se: float, sa: float) -> float:
    """Standard uncertainty of ``beta_off`` from the configured ones of sigma_a, sigma_e and tau
    (linear propagation, GUM sec. 5.1): ``d ln beta_off`` is ``1 - sigma_a Phi / k`` per
    ``d ln sigma_a``, ``-sigma_e Phi / k`` per ``d ln sigma_e`` and ``1 / (tau k)`` per
    ``d ln tau``, with ``k = (sigma_a + sigma_e) Phi + 1/tau``."""
    flux, rate, b_off = probe_terms(params, wavelength)
    if b_off == 0.0:
        return 0.0
    k = rate + 1.0 / params.tau
    d_sa = 1.0 - sa * flux / k
    d_se = -se * flux / k
    d_tau = 1.0 / (params.tau * k)
    u = params.u_cross_sections
    return b_off * math.sqrt((d_sa * u) ** 2 + (d_se * u) ** 2 + (d_tau * params.u_tau) ** 2)


def figures(params: EstimatorParams, ln_ratio: float, sigma_noise: float,
            wavelength: float | None = None) -> dict[str, Quantity]:
    """All figures from one ln R and its noise sigma (uncertainty model in the module doc).

    ``ln R`` measures the pump-induced change from the baseline, and the baseline already holds
    the excitation the probe alone keeps up, ``beta_off`` (`probe_terms`). It is added back, so
    ``n2_per_m3`` and ``beta`` are absolute (``beta = N2 / N_total``) and ``gain_coefficient``,
    ``gain_linear`` and ``gain_db`` are those of the pumped sample itself:
    ``<N2> = ln R / ((sigma_e + sigma_a) L) + beta_off N``, ``ln G = (sigma_e + sigma_a) L <N2>
    - sigma_a N L = g L``. ``beta_off`` carries no noise; its systematic part (`_held_sys`,
    from the configured uncertainties of the cross-sections and of the lifetime) is added in
    quadrature to the others. dB are computed from ``ln G`` directly (no overflow or underflow
    however thick the sample).

    ``wavelength`` selects the cross-sections (`EstimatorParams.cross_sections_at`); if none
    are known there only ``ln_ratio`` is returned. Pulsed probes are corrected with
    `pulsed_small_signal_ln_ratio` first (the noise is carried through its slope).
    """
    lnr, sn = float(ln_ratio), float(sigma_noise)
    xs = params.cross_sections_at(wavelength)
    if xs is None:
        return {"ln_ratio": _q(lnr, sn)}
    se, sa = xs
    if params.probe_kind == "pulsed":
        h = max(1e-6, 1e-3 * abs(sn)) if math.isfinite(sn) else 1e-6
        lo = pulsed_small_signal_ln_ratio(lnr - h, params, se, sa, wavelength)
        hi = pulsed_small_signal_ln_ratio(lnr + h, params, se, sa, wavelength)
        slope = (hi - lo) / (2 * h)
        lnr = pulsed_small_signal_ln_ratio(lnr, params, se, sa, wavelength)
        sn = abs(slope) * sn
    L, N = params.length, params.n_total
    u_cs, u_n, u_l = params.u_cross_sections, params.u_n_total, params.u_length / L
    total = se + sa
    u_sum = u_cs * math.hypot(se, sa) / total
    _, _, b_off = probe_terms(params, wavelength)
    b_off_sys = _held_sys(params, wavelength, se, sa)
    n2_change = float(physics.excited_density_from_ln_ratio(lnr, se, sa, L))
    n2 = n2_change + b_off * N
    beta = n2 / N
    alpha0 = sa * N * L
    ln_held = total * L * b_off * N  # ln T of the baseline state over the unexcited sample
    ln_gain = lnr + ln_held - alpha0
    lng_sys = math.hypot(alpha0 * math.sqrt(u_cs**2 + u_n**2 + u_l**2), total * L * N * b_off_sys)
    gain = math.exp(ln_gain) if ln_gain < 700.0 else math.inf
    g = float(physics.gain_coefficient(n2, N, se, sa))
    g_sys = math.hypot(lnr * u_l / L, sa * N * math.hypot(u_cs, u_n), total * N * b_off_sys)
    db = 10.0 / math.log(10.0)
    return {
        "ln_ratio": _q(lnr, sn),
        "gain_linear": _q(gain, gain * sn, gain * lng_sys),
        "gain_db": _q(float(physics.ln_gain_to_db(ln_gain)), db * sn, db * lng_sys),
        "gain_coefficient_per_cm": _q(float(physics.per_m_to_per_cm(g)), sn / L / 100.0, g_sys / 100.0),
        "n2_per_m3": _q(n2, sn / (total * L), math.hypot(abs(n2_change) * math.hypot(u_sum, u_l),
                                                         N * b_off_sys, b_off * N * u_n)),
        "beta": _q(beta, sn / (total * L * N),
                   math.hypot(abs(n2_change / N) * math.sqrt(u_sum**2 + u_l**2 + u_n**2), b_off_sys)),
    }


def pump_induced(params: EstimatorParams, values: Mapping[str, Quantity],
                 wavelength: float | None = None) -> dict[str, float]:
    """The pump-induced change of the excited fraction behind `figures`' absolute ``beta``, and
    the probe-held part added back (for an estimate's ``extra``); empty without a ``beta``."""
    q = values.get("beta")
    if q is None:
        return {}
    b_off = probe_terms(params, wavelength)[2]
    return {"beta_change": q.value - b_off, "beta_probe_held": b_off}


def _common_flags(state: EstimatorState, t: float, counts: _Counts, wavelength: float | None,
                  uses_baseline: bool) -> set[str]:
    p = state.params
    flags: set[str] = set()
    sat = p.probe_saturation(wavelength)
    if sat is not None and sat > p.weak_fraction:
        flags.add("probe_not_weak")
    if counts.over:
        flags.add("near_full_scale")
    if state.dark is None:
        flags.add("no_dark")
    if uses_baseline:
        if state.baseline is None:
            flags.add("no_baseline")
        elif t - state.baseline.t > p.baseline_max_age:
            flags.add("baseline_stale")
    return flags


def _snr_flags(values: Mapping[str, Quantity], p: EstimatorParams, n_items: int) -> set[str]:
    q = values.get("ln_ratio")
    if q is None:
        return set()
    if n_items < p.min_batches or not (abs(q.value) >= p.snr_min * q.sigma_noise):
        return {"low_snr"}
    return set()


def _wavelength(state: EstimatorState) -> float | None:
    return state.settings.get("probe_wavelength")


# ============================================================================================
# watch mode
# ============================================================================================


def _watch_ingest(core: _WatchCore, f: _Frame, clock: _Clock) -> tuple[_WatchCore, list]:
    B = clock.batch
    valid = f.on & f.settled
    b_first = f.i0 // B
    b_last = (f.i0 + f.n - 1) // B
    nb = b_last - b_first + 1
    items: list = []
    open_id, open_n, open_sum = core.open_id, core.open_n, core.open_sum
    if open_id >= 0 and open_id != b_first:
        if open_n > 0:  # a gap ended the open batch
            items.append(((open_id + 1) * B - 1, open_n, open_sum / open_n))
        open_id, open_n, open_sum = -1, 0.0, 0.0
    if nb == 1:
        cnt = np.array([float(np.count_nonzero(valid))])
        sm = np.array([float(np.sum(f.s, where=valid))])
    else:
        loc = (np.arange(f.i0, f.i0 + f.n) // B) - b_first
        cnt = np.bincount(loc, weights=valid, minlength=nb)
        sm = np.bincount(loc, weights=np.where(valid, f.s, 0.0), minlength=nb)
    if open_id == b_first:
        cnt[0] += open_n
        sm[0] += open_sum
    # batch j is finished when its last sample has been processed
    last = f.i0 + f.n - 1
    n_done = nb if (last + 1) % B == 0 else nb - 1
    for j in range(n_done):
        if cnt[j] > 0:
            items.append(((b_first + j + 1) * B - 1, float(cnt[j]), float(sm[j] / cnt[j])))
    if n_done == nb:
        new = dataclasses.replace(core, open_id=-1, open_n=0.0, open_sum=0.0)
    else:
        new = dataclasses.replace(core, open_id=b_last, open_n=float(cnt[-1]), open_sum=float(sm[-1]))
    return new, items


def _watch_add(core: _WatchCore, item) -> _WatchCore:
    _, n_b, m_b = item
    return _WatchCore(core.open_id, core.open_n, core.open_sum, win=core.win.add(n_b, m_b),
                      cum=core.cum.add(n_b, m_b))


def _watch_flush(core: _WatchCore) -> _WatchCore:
    """Count the open batch (for reports and step ends)."""
    if core.open_n > 0:
        m = core.open_sum / core.open_n
        core = dataclasses.replace(core, cum=core.cum.add(core.open_n, m), win=core.win.add(core.open_n, m),
                                   open_n=0.0, open_sum=0.0, open_id=-1)
    return core


def _watch_estimate(state: EstimatorState, core: _WatchCore, scope: str, t: float, counts: _Counts) -> Estimate:
    stats = core.win if scope == "window" else core.cum
    wl = _wavelength(state)
    flags = _common_flags(state, t, counts, wl, uses_baseline=True)
    values: dict[str, Quantity] = {}
    s_on, e_on = stats.mean_error()
    extra: dict[str, Any] = {"n_batches": stats.k, "s_on": s_on, "s_on_sigma": e_on}
    if stats.k == 0 or (scope == "window" and counts.unsettled):
        flags.add("not_settled")
    if stats.k >= 2 and state.baseline is not None and s_on > 0:
        b = state.baseline
        lnr = math.log(s_on / b.value)
        sn = math.hypot(e_on / s_on, b.sigma / b.value)
        extra["s_off"] = b.value
        values = figures(state.params, lnr, sn, wl)
        extra.update(pump_induced(state.params, values, wl))
        flags |= _snr_flags(values, state.params, stats.k)
    elif stats.k == 1:
        flags.add("low_snr")
    return Estimate(t=t, mode=state.mode, scope=scope, values=MappingProxyType(values), flags=frozenset(flags),
                    n_samples=int(stats.n), extra=MappingProxyType(extra))


# ============================================================================================
# chopped mode
# ============================================================================================


def _residual_mean(r0: int, n: float, dt: float, tau: float) -> float:
    """Mean of exp(-t / tau) over t = (r + 1/2) dt, r = r0 ... r0 + n - 1 (closed form)."""
    if n <= 0:
        return 0.0
    q = math.exp(-dt / tau)
    nn = int(round(n))
    return q ** (r0 + 0.5) * (-math.expm1(-nn * dt / tau)) / (-math.expm1(-dt / tau)) / nn


def _chopped_ingest(core: _ChoppedCore, f: _Frame, clock: _Clock, p: EstimatorParams) -> tuple[_ChoppedCore, list]:
    seg = np.cumsum(f.change)
    nseg = int(seg[-1]) + 1
    w = f.settled
    if nseg == 1:
        cnt = np.array([float(np.count_nonzero(w))])
        sm = np.array([float(np.sum(f.s, where=w))])
        isum = np.array([float(np.sum(np.arange(f.i0, f.i0 + f.n, dtype=np.float64), where=w))])
        msum = np.array([float(np.sum(f.monitor, where=w))])
        m2sum = np.array([float(np.sum(f.monitor * f.monitor, where=w))])
    else:
        cnt = np.bincount(seg, weights=w, minlength=nseg)
        sm = np.bincount(seg, weights=np.where(w, f.s, 0.0), minlength=nseg)
        isum = np.bincount(seg, weights=np.where(w, np.arange(f.i0, f.i0 + f.n, dtype=np.float64), 0.0), minlength=nseg)
        msum = np.bincount(seg, weights=np.where(w, f.monitor, 0.0), minlength=nseg)
        m2sum = np.bincount(seg, weights=np.where(w, f.monitor * f.monitor, 0.0), minlength=nseg)
    starts = [f.i0] + [f.i0 + int(e) for e in f.edges]
    ons = [bool(f.on[0])] + [bool(f.on[e]) for e in f.edges]
    after = [False] + [True] * int(f.edges.size)
    continuing = core.open_start >= 0 and not f.start_is_edge
    if continuing:
        starts[0] = core.open_start
        ons[0] = core.open_on
        after[0] = core.open_after_edge
        cnt[0] += core.open_n
        sm[0] += core.open_sum
        isum[0] += core.open_isum
        msum[0] += core.open_msum
        m2sum[0] += core.open_m2sum
    items: list = []
    settle_n = int(math.ceil(p.off_settle() / clock.dt - 1e-9))
    recent = list(core.recent)
    if core.open_start >= 0 and not continuing:
        recent = []  # the stream restarted: no triple across it
    finished: list[_Segment] = []
    last_on = core.last_on_monitor if continuing else (math.nan, 0.0)
    warm = core.warm and continuing
    for j in range(nseg - 1):
        if j == 0 and f.edges.size and f.edges[0] == 0 and not continuing:
            continue  # the block starts with an edge and there is no open segment: nothing here
        start = starts[j]
        end = starts[j + 1] - 1
        n_j = float(cnt[j])
        mean = float(sm[j] / n_j) if n_j > 0 else math.nan
        centre = float(isum[j] / n_j) if n_j > 0 else math.nan
        res = _residual_mean(settle_n, n_j, clock.dt, p.tau) if (after[j] and not ons[j]) else 0.0
        mon = _level(n_j, float(msum[j]), float(m2sum[j]))
        steady = True
        if ons[j] and n_j > 0:
            steady, last_on = _pump_steady(mon, last_on, after[j]), mon
        finished.append(_Segment(start, end, ons[j], n_j, mean, centre, res, after[j], mon[0], steady))
    last = nseg - 1
    new_core = dataclasses.replace(
        core, open_start=starts[last], open_on=ons[last], open_after_edge=after[last],
        open_n=float(cnt[last]), open_sum=float(sm[last]), open_isum=float(isum[last]),
        open_msum=float(msum[last]), open_m2sum=float(m2sum[last]), last_on_monitor=last_on)
    for sgm in finished:
        if not sgm.on and sgm.n > 0:
            items.append((sgm.end, "off", sgm))
        recent.append(sgm)
        if len(recent) > 3:
            recent.pop(0)
        cyc = _cycle(recent, first_pair=len(recent) == 2 and not recent[0].after_edge and recent[0].on)
        if cyc is not None and not recent[-2].steady:
            cyc = None  # the pump was still ramping up (a soft start): not a settled cycle
        if cyc is not None:
            items.append((sgm.end, "cycle", cyc))
            warm = True
        elif len(recent) >= 2 and recent[-2].on and not sgm.on:
            # before the first steady cycle the pump is still coming up: expected, not a fault
            items.append((sgm.end, "skip" if warm else "warmup", None))
    new_core = dataclasses.replace(new_core, recent=tuple(recent[-2:]), ref_sum=core.ref_sum + f.ref_sum,
                                   ref_n=core.ref_n + f.n, warm=warm)
    return new_core, items


#: Two successive pump-on parts have the same pump level when their mean pump-monitor readings
#: agree to this fraction, or to 5 standard errors of their difference if that is more
#: (common practice, no source: a soft-start ramp differs by tens of %).
PUMP_LEVEL_TOLERANCE = 2e-3


def _level(n: float, s1: float, s2: float) -> tuple[float, float]:
    """(mean, variance of the mean) of ``n`` readings from their sum and sum of squares."""
    if not n > 0:
        return math.nan, 0.0
    m = s1 / n
    return m, (max(s2 - s1 * m, 0.0) / (n - 1) / n if n > 1 else 0.0)


def _pump_steady(monitor: tuple[float, float], previous: tuple[float, float], after_edge: bool) -> bool:
    """Whether a pump-on part ran at a steady pump level: its mean monitor reading (mean,
    variance) matches the previous on part's. The first on part after a rising edge with no
    earlier on part to compare with (the output just switched on, perhaps with a soft-start
    ramp) is not trusted; one that starts with the stream (after the step settle time) is."""
    (m, v), (mp, vp) = monitor, previous
    if not math.isfinite(mp):
        return not after_edge
    allowed = max(PUMP_LEVEL_TOLERANCE * max(abs(m), abs(mp)), 5.0 * math.sqrt(v + vp))
    return abs(m - mp) <= allowed


def _cycle(recent: list[_Segment], first_pair: bool) -> tuple[float, float, float, float, float] | None:
    """(ln R, samples, residual-decay correction in ln R, weight f of the later off level,
    difference of the two ln off levels or nan) of the on segment in the middle of the
    last three finished segments, or None."""
    if first_pair:
        on, off_a = recent[-2], recent[-1]
        if not (on.on and not off_a.on and on.n > 0 and off_a.n > 0):
            return None
        if not (on.mean > 0 and off_a.mean > 0):
            return None
        a = math.log(on.mean / off_a.mean)
        s_off = off_a.mean * math.exp(-a * off_a.residual)
        x = math.log(on.mean / s_off)
        return x, on.n + off_a.n, x - a, 1.0, math.nan
    if len(recent) < 3:
        return None
    off_b, on, off_a = recent[-3], recent[-2], recent[-1]
    if off_b.on or not on.on or off_a.on or min(off_b.n, on.n, off_a.n) <= 0:
        return None
    if not (on.mean > 0 and off_b.mean > 0 and off_a.mean > 0):
        return None
    frac = (on.centre - off_b.centre) / (off_a.centre - off_b.centre)
    s_off = off_b.mean + (off_a.mean - off_b.mean) * frac
    a = math.log(on.mean / s_off)  # first pass, for the residual-decay correction
    sb = off_b.mean * math.exp(-a * off_b.residual)
    sa = off_a.mean * math.exp(-a * off_a.residual)
    s_off = sb + (sa - sb) * frac
    x = math.log(on.mean / s_off)
    return x, off_b.n + on.n + off_a.n, x - a, frac, math.log(sa / sb)


def _chopped_add(core: _ChoppedCore, item) -> _ChoppedCore:
    _, kind, payload = item
    if kind == "cycle":
        x, n, corr, frac, d = payload
        ds, dsq, dn = core.off_dsum, core.off_dsq, core.off_dn
        if math.isfinite(d):
            ds, dsq, dn = ds + d, dsq + d * d, dn + 1
        return dataclasses.replace(core, win=core.win.add(x, n), cum=core.cum.add(x, n),
                                   frac_sum=core.frac_sum + frac, win_corr=core.win_corr + corr,
                                   cum_corr=core.cum_corr + corr, off_dsum=ds, off_dsq=dsq, off_dn=dn)
    if kind == "off":
        # the pump-off level, less the residual of the last gain decay (ln R from the cycles so far)
        a = core.cum.mean() if core.cum.k else 0.0
        m = payload.mean * math.exp(-a * payload.residual)
        return dataclasses.replace(core, win_off=core.win_off.add(m, payload.n), cum_off=core.cum_off.add(m, payload.n))
    return core


def _chopped_noise(core: _ChoppedCore, stats: _ScalarStats) -> float:
    """Noise sigma of the mean ln R of the cycles in ``stats`` (nan if it cannot be told).

    Neighbouring cycles share the off level between them, so their ln R values are correlated
    at lag one, ``gamma_1 = f (1 - f) var(ln S_off)`` (``f`` the interpolation weight of the
    later off level, 1/2 at a 50 % duty cycle), and at no other lag: the exact variance of the
    mean of ``k`` cycles is ``(gamma_0 + 2 gamma_1 (k - 1) / k) / k``, which with the sample
    variance ``s^2`` (whose expectation is ``gamma_0 - 2 gamma_1 / k``) is
    ``(s^2 + 2 gamma_1) / k``: the variance of the mean of correlated data in terms of its
    autocovariances, with which Flyvbjerg and Petersen start their blocking analysis [1]_,
    here exact because the covariance is known to stop at lag one. ``var(ln S_off)`` is half
    the mean squared difference of the two off levels around each cycle, less their mean (a
    linear drift moves every difference alike) [2]_. A window of one or two cycles takes the
    scatter of all cycles so far.

    References
    ----------
    .. [1] H. Flyvbjerg and H. G. Petersen, "Error estimates on averages of correlated data",
       J. Chem. Phys. 91, 461 (1989).
    .. [2] J. von Neumann, R. H. Kent, H. R. Bellinson and B. I. Hart, "The mean square
       successive difference", Ann. Math. Statist. 12, 153 (1941).
    """
    k = stats.k
    cum = core.cum
    if cum.k == 0 or k == 0:
        return math.nan
    f = core.frac_sum / cum.k
    n = core.off_dn
    v_off = 0.5 * max(core.off_dsq / n - (core.off_dsum / n) ** 2, 0.0) * n / (n - 1) if n >= 2 else 0.0
    gamma1 = f * (1.0 - f) * v_off
    if k >= 3:
        s2 = stats.std() ** 2
    elif cum.k >= 3:
        s2 = cum.std() ** 2
    else:
        return math.nan
    return math.sqrt(max(s2 + 2.0 * gamma1, 0.0) / k)


def _dark_noise(dark: Dark | None, ref_level: float, s_off: float, ln_ratio: float) -> float:
    """The dark's share of the noise of ln R: an error ``d`` of the probe dark moves ``ln S``
    by ``-d / (S V_ref)``, so ln R by ``d (1 / S_off - 1 / S_on) / V_ref`` (not second order:
    S_on and S_off differ by the factor R); the reference dark cancels in the ratio."""
    if dark is None or not (ref_level > 0 and s_off > 0 and math.isfinite(ln_ratio)):
        return 0.0
    s_on = s_off * math.exp(ln_ratio)
    return abs(dark.probe_sigma * (1.0 / s_off - 1.0 / s_on) / ref_level)


def _with_ln_ratio_systematic(values: dict[str, Quantity], sys: float) -> dict[str, Quantity]:
    """``values`` (from `figures`) with a systematic part ``sys`` of ln R propagated into every
    figure through its noise sensitivity to ln R (linear, GUM sec. 5.1), in quadrature."""
    q = values.get("ln_ratio")
    if q is None or not (sys > 0) or not q.sigma_noise > 0:
        return values
    out = {}
    for name, v in values.items():
        sens = v.sigma_noise / q.sigma_noise
        out[name] = _q(v.value, v.sigma_noise, math.hypot(v.sigma_systematic, sens * sys))
    return out


def _chopped_estimate(state: EstimatorState, core: _ChoppedCore, scope: str, t: float, counts: _Counts) -> Estimate:
    p = state.params
    stats = core.win if scope == "window" else core.cum
    off = core.win_off if scope == "window" else core.cum_off
    wl = _wavelength(state)
    flags = _common_flags(state, t, counts, wl, uses_baseline=False)
    extra: dict[str, Any] = {"n_cycles": stats.k, "n_off_levels": off.k}
    values: dict[str, Quantity] = {}
    if counts.skipped:
        flags.add("not_settled")
    if stats.k == 0:
        flags.add("not_settled")
    else:
        lnr = stats.mean()
        sn = _chopped_noise(core, stats)
        if math.isfinite(sn):
            ref = core.ref_sum / core.ref_n if core.ref_n else math.nan
            s_off = core.cum_off.mean() if core.cum_off.k else math.nan
            sn = math.hypot(sn, _dark_noise(state.dark, ref, s_off, lnr))
            values = figures(p, lnr, sn, wl)
            # the residual-decay correction of the off levels: the edge lies somewhere in its
            # sample interval (uniform) and tau is known to u_tau
            corr = abs((core.win_corr if scope == "window" else core.cum_corr) / stats.k)
            t0 = p.off_settle() / p.tau
            dt = state.clock.dt
            rel = math.hypot(dt / p.tau / math.sqrt(12.0), (t0 + 1.0) * p.u_tau)
            values = _with_ln_ratio_systematic(values, corr * rel)
            flags |= _snr_flags(values, p, stats.k if scope == "cumulative" else core.cum.k)
        else:
            flags.add("low_snr")
            extra["ln_ratio_unweighted"] = lnr
    b = state.baseline
    if b is not None and off.k >= 2:
        drift_sigma = math.hypot(off.error(), b.sigma)
        extra["s_off"] = off.mean()
        extra["baseline_drift_sigmas"] = (off.mean() - b.value) / drift_sigma if drift_sigma > 0 else math.inf
        if abs(off.mean() - b.value) > p.baseline_drift_k * drift_sigma:
            flags.add("baseline_stale")
    if b is not None and t - b.t > p.baseline_max_age:
        flags.add("baseline_stale")
    return Estimate(t=t, mode=state.mode, scope=scope, values=MappingProxyType(values), flags=frozenset(flags),
                    n_samples=int(stats.n_samples), extra=MappingProxyType(extra))


# ============================================================================================
# decay mode
# ============================================================================================


def _decay_ingest(core: _DecayCore, f: _Frame, clock: _Clock, p: EstimatorParams,
                  state: EstimatorState) -> tuple[_DecayCore, list]:
    nb, bn = core.n_bins, core.bin_n
    fit_n = nb * bn
    dt = clock.dt
    tail0 = int(math.ceil(p.decay_tail_start / dt))
    record_n = max(int(math.ceil(p.decay_record / dt)), fit_n, tail0 + 1)
    width = nb + 1
    off = ~f.on
    offedge = f.change & off
    off_local = np.flatnonzero(offedge)
    carry_edge = core.open_edge if not f.start_is_edge else -1
    # the settled pump-on level (mean ln S) before each on->off edge: ln R(0) of its decay
    seg = np.cumsum(f.change)
    nseg = int(seg[-1]) + 1
    with np.errstate(invalid="ignore", divide="ignore"):
        ls_all = np.log(f.s)
    won = f.on & f.settled & np.isfinite(ls_all)
    lsz = np.where(won, ls_all, 0.0)
    on_c = np.bincount(seg, weights=won.astype(np.float64), minlength=nseg)
    on_1 = np.bincount(seg, weights=lsz, minlength=nseg)
    on_2 = np.bincount(seg, weights=lsz * lsz, minlength=nseg)
    on_m = np.bincount(seg, weights=np.where(won, f.monitor, 0.0), minlength=nseg)
    on_mm = np.bincount(seg, weights=np.where(won, f.monitor * f.monitor, 0.0), minlength=nseg)
    after0 = False
    last_on = (math.nan, 0.0)
    if not f.start_is_edge:
        c0, a0, b0, m0, mm0 = core.on_open
        on_c[0] += c0
        on_1[0] += a0
        on_2[0] += b0
        on_m[0] += m0
        on_mm[0] += mm0
        after0 = core.on_open_after_edge
        last_on = core.last_on_monitor
    last = nseg - 1
    on_open = ((float(on_c[last]), float(on_1[last]), float(on_2[last]), float(on_m[last]), float(on_mm[last]))
               if f.on[-1] else (0.0, 0.0, 0.0, 0.0, 0.0))
    levels = {} if f.start_is_edge else {e: (n_, a_, b_) for e, n_, a_, b_ in core.on_levels}
    for e in off_local:
        j = int(seg[e]) - 1
        if j >= 0 and on_c[j] > 0:
            mon = _level(float(on_c[j]), float(on_m[j]), float(on_mm[j]))
            steady = _pump_steady(mon, last_on, after0 if j == 0 else True)
            last_on = mon
            if steady:  # not while the pump still ramps up (soft start)
                levels[f.i0 + int(e)] = (float(on_c[j]), float(on_1[j]), float(on_2[j]))
    core = dataclasses.replace(core, on_open=on_open, on_open_after_edge=(last > 0) or after0,
                               last_on_monitor=last_on, ref_sum=core.ref_sum + f.ref_sum, ref_n=core.ref_n + f.n)
    if off_local.size == 0 and carry_edge < 0:
        return dataclasses.replace(core, open_edge=-1, open_sums=None, on_levels=()), []
    # the last on->off edge index for each sample (global), -1 if none known
    local = np.arange(f.n)
    if off_local.size:
        marks = np.where(offedge, local + f.i0, carry_edge)
        last_off = np.maximum.accumulate(marks)
    else:
        last_off = np.full(f.n, carry_edge)
    r = local + f.i0 - last_off
    sel = off & (last_off >= 0) & (r < record_n) & ((r < fit_n) | (r >= tail0))
    row = np.cumsum(offedge)  # 0: the carried decay
    n_rows = int(off_local.size) + 1
    idx = np.flatnonzero(sel)
    rr = r[idx]
    key = row[idx] * width + np.where(rr < fit_n, rr // bn, nb)
    with np.errstate(invalid="ignore", divide="ignore"):
        sv = np.log(f.s[idx])  # bins average ln S: ln of a bin mean would bend the exponential
    finite = np.isfinite(sv)
    if not finite.all():
        key, sv = key[finite], sv[finite]
    size = n_rows * width
    sums = np.stack([
        np.bincount(key, minlength=size).astype(np.float64),
        np.bincount(key, weights=sv, minlength=size),
        np.bincount(key, weights=sv * sv, minlength=size),
    ]).reshape(3, n_rows, width)
    if carry_edge >= 0 and core.open_sums is not None:
        sums[:, 0, :] += core.open_sums
    row_edges = [carry_edge] + [f.i0 + int(e) for e in off_local]
    all_edges = f.i0 + f.edges
    last_index = f.i0 + f.n - 1
    items: list = []
    new_open_edge, new_open = -1, None
    for d, e in enumerate(row_edges):
        if e < 0:
            continue
        later = all_edges[all_edges > e]
        end = e + record_n
        if later.size:
            end = min(end, int(later[0]))
        if end - 1 <= last_index:
            items.append(_finish_decay(state, core, e, end, sums[:, d, :], fit_n, tail0, dt,
                                       levels.get(e, (0.0, 0.0, 0.0))))
        else:
            new_open_edge, new_open = e, sums[:, d, :].copy()
    kept = ((new_open_edge, *levels[new_open_edge]),) if new_open_edge in levels else ()
    return dataclasses.replace(core, open_edge=new_open_edge, open_sums=new_open, on_levels=kept), items


def _finish_decay(state: EstimatorState, core: _DecayCore, edge: int, end: int, sums: np.ndarray, fit_n: int,
                  tail0: int, dt: float, on_sums: tuple[float, float, float] = (0.0, 0.0, 0.0)):
    p = state.params
    nb = core.n_bins
    b = end - 1
    if end - edge < fit_n:
        return (b, "skip", None)
    c, s1, s2 = sums[0, :nb], sums[1, :nb], sums[2, :nb]
    good = c > 0
    mean = np.where(good, s1 / np.maximum(c, 1.0), 0.0)  # mean ln S per bin
    ss = np.where(good, np.maximum(s2 - s1 * mean, 0.0), 0.0)
    tc, t1, t2 = sums[0, nb], sums[1, nb], sums[2, nb]
    min_tail = int(math.ceil(p.decay_min_tail / dt))
    tail_ok = tc >= max(min_tail, 2)
    use = p.decay_reference
    if use == "auto":
        use = "tail" if tail_ok else "baseline"
    if use == "tail":
        if not tail_ok:
            return (b, "skip", None)
        ln_off = t1 / tc  # mean ln S of the tail: its noise bias cancels that of the bins
        ref_var = max(t2 - t1 * ln_off, 0.0) / (tc - 1) / tc
        tail_n = int(tc)
    else:
        if state.baseline is None:
            return (b, "no_reference", None)
        ln_off = math.log(state.baseline.value)
        ref_var = (state.baseline.sigma / state.baseline.value) ** 2
        tail_n = 0
    lnr = np.where(good, mean - ln_off, 0.0)
    on_n, on_1, on_2 = on_sums
    on_level, on_var = math.nan, 0.0
    if on_n >= 2:
        m_on = on_1 / on_n
        on_level = m_on - ln_off
        on_var = max(on_2 - on_1 * m_on, 0.0) / (on_n - 1) / on_n
    else:
        on_n = 0.0
    return (b, "decay", _Decay(b, c, lnr, ss, use, ref_var, float(np.sum(c) + tc), tail_n,
                               on_n, on_level, on_var, float(ln_off)))


def _decay_add(core: _DecayCore, item) -> _DecayCore:
    _, kind, payload = item
    if kind != "decay":
        return core
    return dataclasses.replace(core, win=core.win.add(payload), cum=core.cum.add(payload), cum_fit=None)


def _decay_weights(stats: _CurveStats, t: np.ndarray, used: np.ndarray) -> np.ndarray:
    """Relative standard deviations of the averaged curve's bins.

    From the within-bin scatter of ln S where bins hold several samples (smoothed over time
    with a quadratic in log variance, so that the weights do not follow the noise), else from
    the sample counts alone. The scatter between decays is not used: it also holds real
    differences of amplitude between decays (a pump still ramping up, pump noise), which are
    not noise about the averaged curve. Only the shape matters: the fit scales the covariance
    by its reduced chi-square.
    """
    cnt = stats.count[used]
    dof = stats.dof[used]
    if np.all(dof >= 3):
        var = stats.ss[used] / dof / cnt
        ok = var > 0
        if np.count_nonzero(ok) >= 6:
            coef = np.polyfit(t[ok], np.log(var[ok]), 2)
            return np.sqrt(np.exp(np.polyval(coef, t)))
    return 1.0 / np.sqrt(cnt)


def _rho_amp(fit: fitting.FitResult | None, rho: float) -> float:
    """The tail residual ``A rho`` to add back to every bin, from the previous fit."""
    return 0.0 if fit is None else fit.value("amplitude") * rho


def _offset_sensitivity(t: np.ndarray, a: float, tau: float, sig: np.ndarray) -> tuple[float, float]:
    """(dA/d delta, dtau/d delta) of the weighted fit when every point moves by -delta."""
    e = np.exp(-t / tau)
    jac = np.column_stack([e, a * t / tau**2 * e])
    w = 1.0 / sig**2
    jtw = jac.T * w
    try:
        sol = np.linalg.solve(jtw @ jac, jtw @ (-np.ones_like(t)))
    except np.linalg.LinAlgError:
        return math.nan, math.nan
    return float(sol[0]), float(sol[1])


def _decay_fit(state: EstimatorState, core: _DecayCore, stats: _CurveStats, dt: float) -> dict[str, Any] | None:
    p = state.params
    if stats.n_decays == 0:
        return None
    bn = core.bin_n
    j = np.arange(core.n_bins)
    t = (j + 0.5) * bn * dt  # bin centres after the edge (taken half a sample before the first off sample)
    used = (stats.count > 0) & (j * bn * dt >= p.decay_skip)
    if np.count_nonzero(used) < 4:
        return None
    tu = t[used]
    y = stats.w_y[used] / stats.count[used]
    sig = _decay_weights(stats, tu, used)
    # A tail taken as S_off still holds A rho(tau) of gain (rho: the tail's mean exp(-t/tau)),
    # so every bin reads A (exp(-t/tau) - rho); add A rho back with the latest fit (converges
    # in two passes, rho being ~1e-4).
    tail0 = int(math.ceil(p.decay_tail_start / dt))
    rho = 0.0
    fit = None
    for _ in range(3):
        try:
            fit = fitting.fit_exponential_decay(tu, y + _rho_amp(fit, rho), sig, tau_guess=p.tau)
        except ValueError:
            return None
        rho = stats.tail_residual(tail0, dt, fit.value("tau"))
        if rho == 0.0:
            break
    a, tau = fit.value("amplitude"), fit.value("tau")
    # bin averaging of a sampled exponential scales the amplitude only
    x = dt / (2.0 * tau)
    a *= bn * math.sinh(x) / math.sinh(bn * x) if bn > 1 else 1.0
    var_a = fit.covariance[0, 0]
    var_tau = fit.covariance[1, 1]
    # the unpumped level: per-decay tails average down, a stored baseline is common to all
    ref_var = stats.ref_var / stats.n_decays**2 + stats.ref_common
    da, dtau = _offset_sensitivity(tu, a, tau, sig)
    if math.isfinite(da):
        var_a += da * da * ref_var
        var_tau += dtau * dtau * ref_var
    return {
        "amplitude": a,
        "amplitude_sigma": math.sqrt(var_a),
        # where the pump really went off within its sample interval (uniform over dt): the
        # same for every decay of a chop commensurate with the sample clock, so systematic
        "amplitude_edge_sys": abs(a) * dt / tau / math.sqrt(12.0),
        "tau": tau,
        "tau_sigma": math.sqrt(var_tau),
        "chi2_reduced": fit.chi2_reduced,
        "dof": fit.dof,
        "t": tu,
        "y": y,
        "sigma": sig * math.sqrt(max(fit.chi2_reduced, 0.0)) if math.isfinite(fit.chi2_reduced) else sig,
    }


def _decay_level(state: EstimatorState, core: _DecayCore, stats: _CurveStats,
                 fit: Mapping[str, Any]) -> tuple[float, float] | None:
    """(ln R(0), its noise sigma) from the settled pump-on level before each decay, or None.

    Just before the pump goes off, ln R is the settled pump-on level, so ``ln R(0)`` is the
    mean over decays of (mean ln S of the settled pump-on samples before the edge) less
    (ln S_off of the same decay). This needs no edge position, unlike the fitted amplitude,
    whose extrapolation to the edge carries ``(A dt / tau)^2 / 12`` from an edge anywhere in
    its sample interval. A tail taken as ``S_off`` still holds ``ln R(0) rho`` of gain
    (`_CurveStats.tail_residual`, with the fitted decay time), put back by dividing by
    ``1 - rho``. The noise is the scatter of the per-decay values (independent: each pairs an
    on level with the tail right after it) over sqrt(k), or for fewer than three decays their
    within-scatter; a stored baseline adds its own error once; the dark's share is added.
    """
    lv = stats.level
    if lv.k == 0:
        return None
    p = state.params
    dt = state.clock.dt
    tail0 = int(math.ceil(p.decay_tail_start / dt))
    rho = stats.tail_residual(tail0, dt, fit["tau"], of_levels=True)
    d = lv.mean()
    if lv.k >= 3:
        var = lv.std() ** 2 / lv.k
    else:
        var = stats.level_var / lv.k**2
    if any(n == 0 for n, _ in stats.level_tails):  # decays referred to the stored baseline
        var += stats.ref_common
    lnr0 = d / (1.0 - rho)
    ref = core.ref_sum / core.ref_n if core.ref_n else math.nan
    s_off = math.exp(stats.level_ln_off / lv.k)
    sn = math.hypot(math.sqrt(var) / (1.0 - rho), _dark_noise(state.dark, ref, s_off, lnr0))
    return lnr0, sn


def _lifetime_from_decay(p: EstimatorParams, decay_time: float, sigma: float,
                         wavelength: float | None) -> tuple[float, float, float]:
    """(lifetime, its sigma, probe-stimulated rate) from the fitted decay time.

    With the pump off, a CW probe keeps stimulating transitions, so the inversion decays at
    ``1/tau + (sigma_e + sigma_a) Phi_s`` (the rate equation's relaxation rate; Koechner sec. 1.4)
    with ``Phi_s`` the probe photon flux weighted by the probe's own Gaussian profile,
    ``P / (pi w^2) / (h nu)`` (half the on-axis value). The lifetime is what remains. Pulsed
    probes are left uncorrected (their mean stimulated rate is negligible).
    """
    rate = probe_terms(p, wavelength)[1]  # the same rate as the sweep fit's (`_sweep_fits`)
    if not (rate > 0 and decay_time > 0):
        return decay_time, sigma, 0.0
    k = 1.0 / decay_time - rate
    if not k > 0:
        return decay_time, sigma, rate
    tau = 1.0 / k
    return tau, sigma * (tau / decay_time) ** 2, rate


def _decay_estimate(state: EstimatorState, core: _DecayCore, scope: str, t: float, counts: _Counts) -> Estimate:
    p = state.params
    stats = core.win if scope == "window" else core.cum
    wl = _wavelength(state)
    uses_baseline = p.decay_reference == "baseline"
    flags = _common_flags(state, t, counts, wl, uses_baseline=uses_baseline)
    if counts.no_reference:
        flags.add("no_baseline")
    extra: dict[str, Any] = {"n_decays": stats.n_decays}
    values: dict[str, Quantity] = {}
    fit = _decay_fit(state, core, stats, state.clock.dt) if stats.n_decays else None
    if fit is None:
        if stats.n_decays == 0:
            flags.add("not_settled" if counts.skipped else "low_snr")
        else:
            flags.add("low_snr")
    else:
        level = _decay_level(state, core, stats, fit)
        if level is not None:
            lnr0, sn0 = level
            values = figures(p, lnr0, sn0, wl)
            extra["ln_ratio_from"] = "on_level"
        else:
            values = _with_ln_ratio_systematic(figures(p, fit["amplitude"], fit["amplitude_sigma"], wl),
                                               fit["amplitude_edge_sys"])
            extra["ln_ratio_from"] = "fit"
        tau, tau_sigma, probe_rate = _lifetime_from_decay(p, fit["tau"], fit["tau_sigma"], wl)
        xs = p.cross_sections_at(wl)
        u_rate = 0.0
        if xs is not None and probe_rate > 0:
            # the correction's own uncertainty: the probe rate scales with sigma_e + sigma_a
            u_rate = probe_rate * p.u_cross_sections * math.hypot(*xs) / (xs[0] + xs[1])
        values["tau_s"] = _q(tau, tau_sigma, tau * tau * u_rate)
        extra["decay_time_s"] = float(fit["tau"])
        extra["probe_rate_per_s"] = probe_rate
        q = values["ln_ratio"]
        if not abs(q.value) >= p.snr_min * q.sigma_noise:
            flags.add("low_snr")
        if not (fit["tau"] >= p.snr_min * fit["tau_sigma"]):
            flags.add("low_snr")
        extra["fit"] = {k: float(fit[k]) for k in ("amplitude", "amplitude_sigma", "tau", "tau_sigma", "chi2_reduced")}
        extra["fit"]["dof"] = int(fit["dof"])
        if scope == "cumulative":
            model = fit["amplitude"] * np.exp(-fit["t"] / fit["tau"])
            extra["curve"] = {
                "t_s": [float(v) for v in fit["t"]],
                "ln_ratio": [float(v) for v in fit["y"]],
                "sigma": [float(v) for v in fit["sigma"]],
                "fit": [float(v) for v in model],
            }
    return Estimate(t=t, mode=state.mode, scope=scope, values=MappingProxyType(values), flags=frozenset(flags),
                    n_samples=int(stats.n_samples), extra=MappingProxyType(extra))


# ============================================================================================
# sweep mode
# ============================================================================================


def _step_figure(state: EstimatorState, inner) -> tuple[float, float, int, float] | None:
    """(ln R, noise sigma, batches or cycles, samples) of the step so far, or None."""
    if isinstance(inner, _WatchCore):
        inner = _watch_flush(inner)
        stats = inner.cum
        s_on, e_on = stats.mean_error()
        b = state.baseline
        if stats.k < 2 or b is None or not s_on > 0:
            return None
        return math.log(s_on / b.value), math.hypot(e_on / s_on, b.sigma / b.value), stats.k, stats.n
    stats = inner.cum
    if stats.k < 3:
        return None
    return stats.mean(), _chopped_noise(inner, stats), stats.k, stats.n_samples


def _close_step(state: EstimatorState) -> EstimatorState:
    core = state.core
    if not isinstance(core, _SweepCore):
        return state
    point = _make_point(state, core)
    if point is None:
        return state
    points = core.points + (MappingProxyType(point),)
    core = dataclasses.replace(core, points=points, fits=MappingProxyType(_sweep_fits(state, points)))
    return dataclasses.replace(state, core=core)


def _make_point(state: EstimatorState, core: _SweepCore) -> dict[str, Any] | None:
    fig = _step_figure(state, core.inner)
    if fig is None:
        return None
    lnr, sn, k, n = fig
    wl = _wavelength(state)
    point: dict[str, Any] = {
        "pump_power_w": state.settings.get("pump_power"),
        "pump_current_a": state.settings.get("pump_current"),
        "probe_wavelength_m": wl,
        "ln_ratio": lnr,
        "ln_ratio_sigma": sn,
        "n_items": k,
        "n_samples": int(n),
        "gain_change_per_m": lnr / state.params.length,
        "gain_change_per_m_sigma": sn / state.params.length,
    }
    vals = figures(state.params, lnr, sn, wl)
    if "beta" in vals:
        point["beta"] = vals["beta"].value
        point["beta_sigma_noise"] = vals["beta"].sigma_noise
        point["beta_sigma"] = vals["beta"].sigma
        point.update(pump_induced(state.params, vals, wl))
    # the step's span on the run clock: from its settle time after the setting to its last sample
    clock = state.clock
    if clock is not None:
        step_n = int(math.ceil(state.params.step_settle_time / clock.dt - 1e-9))
        first = max(state.pump.last_step, 0) + step_n
        point["t_start"] = clock.time(min(first, clock.next_index - 1))
        point["t_end"] = clock.time(clock.next_index - 1)
    return point


def _saturation_fit(x: np.ndarray, y: np.ndarray, s: np.ndarray, absorbance: float | None,
                    b_off: float) -> tuple[fitting.FitResult, float | None]:
    """Fit the pump-induced change ``y`` (beta less the probe-held ``b_off``) with the saturation
    form; (fit, the absorbance used).

    With the probe on, the steady state is ``beta = (beta_max s + b_off) / (1 + s)``, so
    ``beta - b_off`` follows the saturation form with maximum ``beta_max - b_off`` and the
    saturation power stretched by ``1 + tau W_s`` (the caller undoes both). Over a thick sample
    the pump's unbleached absorption coefficient is then ``sigma_ap N (1 - b_off / beta_max)``
    (the probe-held ions do not absorb the pump): one refit with that absorbance, taking
    ``beta_max`` from the first fit (rate equations: Svelto, *Principles of Lasers*, ch. 7).
    """
    fit = fitting.fit_saturation(x, y, s, absorbance=absorbance)
    if absorbance is None or b_off <= 0.0:
        return fit, absorbance
    bm = fit.value("beta_max") + b_off
    if not bm > b_off:
        return fit, absorbance
    a_eff = absorbance * (1.0 - b_off / bm)
    return fitting.fit_saturation(x, y, s, absorbance=a_eff), a_eff


def _sweep_fits(state: EstimatorState, points: tuple[Mapping[str, Any], ...]) -> dict[str, Any]:
    p = state.params
    out: dict[str, Any] = {}
    # pump saturation: points at one wavelength with beta and a pump power
    pw = [pt for pt in points if pt.get("pump_power_w") is not None and "beta" in pt]
    if pw:
        wl0 = pw[-1]["probe_wavelength_m"]
        pw = [pt for pt in pw if pt["probe_wavelength_m"] == wl0]
    if len({pt["pump_power_w"] for pt in pw if pt["pump_power_w"] > 0}) >= 3:
        x = np.array([pt["pump_power_w"] for pt in pw])
        _, w_probe, b_off = probe_terms(p, wl0)
        # the pump-induced change (the points' beta less the probe-held part)
        y = np.array([pt["beta"] for pt in pw]) - b_off
        s = np.array([pt["beta_sigma_noise"] for pt in pw])
        a = p.pump_absorbance
        try:
            fit, a_eff = _saturation_fit(x, y, s, a, b_off)
        except ValueError as exc:
            out["saturation_error"] = str(exc)
        else:
            xs = p.cross_sections_at(wl0)
            se, sa = xs if xs is not None else (p.sigma_e, p.sigma_a)
            u_sum = p.u_cross_sections * math.hypot(se, sa) / (se + sa)
            rel_sys = math.sqrt(u_sum**2 + (p.u_length / p.length) ** 2 + p.u_n_total**2)
            # the probe's own stimulated rate adds to 1/tau: the fitted saturation power is
            # p_sat (1 + tau W_s); its maximum is beta_max less the probe-held part
            stretch = 1.0 + p.tau * w_probe
            bm, ps = fit.value("beta_max") + b_off, fit.value("p_sat") / stretch
            sys_bm, sys_ps = (bm - b_off) * rel_sys, ps * (p.tau * w_probe / stretch) * p.u_tau
            if a is not None:
                # the configured absorbance is uncertain too: its effect by refitting at A +/- u_A
                ua = a * p.u_pump_absorbance
                try:
                    hi, _ = _saturation_fit(x, y, s, a + ua, b_off)
                    lo, _ = _saturation_fit(x, y, s, max(a - ua, 1e-6 * a), b_off)
                except ValueError:
                    pass
                else:
                    d_bm = 0.5 * (hi.value("beta_max") - lo.value("beta_max"))
                    d_ps = 0.5 * (hi.value("p_sat") - lo.value("p_sat")) / stretch
                    sys_bm, sys_ps = math.hypot(sys_bm, d_bm), math.hypot(sys_ps, d_ps)
            grid = np.linspace(0.0, float(np.max(x)) * 1.1, 50)
            curve = b_off + (fitting.thick_sample_fraction(grid, bm - b_off, ps * stretch, a_eff) if a is not None
                             else physics.beta_of_pump(grid, bm - b_off, ps * stretch))
            out["saturation"] = {
                "model": "thick" if a is not None else "thin", "pump_absorbance": a,
                "beta_max": bm, "beta_max_sigma_noise": fit.sigma("beta_max"),
                "beta_max_sigma_systematic": sys_bm,
                "p_sat_w": ps, "p_sat_w_sigma_noise": fit.sigma("p_sat") / stretch,
                "p_sat_w_sigma_systematic": sys_ps,
                "probe_rate_per_s": w_probe, "beta_probe_held": b_off,
                "chi2_reduced": fit.chi2_reduced, "dof": fit.dof,
                "curve": {"pump_power_w": [float(v) for v in grid], "beta": [float(v) for v in curve]},
            }
    # gain spectrum over probe wavelength
    wv = [pt for pt in points if pt.get("probe_wavelength_m") is not None]
    if wv:
        pw0 = wv[-1]["pump_power_w"]
        wv = [pt for pt in wv if pt["pump_power_w"] == pw0]
    if len({pt["probe_wavelength_m"] for pt in wv}) >= 5:
        lam = np.array([pt["probe_wavelength_m"] for pt in wv])
        nu = constants.c / lam
        y = np.array([pt["gain_change_per_m"] for pt in wv])
        s = np.array([pt["gain_change_per_m_sigma"] for pt in wv])
        try:
            fit = fitting.fit_voigt(nu, y, s)
        except ValueError as exc:
            out["spectrum_error"] = str(exc)
        else:
            nu0 = fit.value("centre")
            sg, gl = fit.value("sigma_gauss"), fit.value("gamma_lorentz")
            out["spectrum"] = {
                "peak_gain_change_per_m": fit.value("height"), "peak_gain_change_per_m_sigma": fit.sigma("height"),
                "centre_hz": nu0, "centre_hz_sigma": fit.sigma("centre"),
                "centre_m": constants.c / nu0, "centre_m_sigma": constants.c / nu0**2 * fit.sigma("centre"),
                "gaussian_fwhm_hz": 2.0 * math.sqrt(2.0 * math.log(2.0)) * sg,
                "gaussian_fwhm_hz_sigma": 2.0 * math.sqrt(2.0 * math.log(2.0)) * fit.sigma("sigma_gauss"),
                "lorentzian_fwhm_hz": 2.0 * gl, "lorentzian_fwhm_hz_sigma": 2.0 * fit.sigma("gamma_lorentz"),
                "voigt_fwhm_hz": fitting.voigt_fwhm(sg, gl),
                "chi2_reduced": fit.chi2_reduced, "dof": fit.dof,
            }
        if p.spectrum is not None and p.zero_line_energy is not None:
            try:
                xs = [p.spectrum.at(v) for v in lam]
                check = fitting.mccumber_consistency(
                    lam, y * p.length, s * p.length, [x[0] for x in xs], [x[1] for x in xs],
                    p.zero_line_energy, p.temperature)
            except (ValueError, GainbenchError) as exc:  # a wavelength outside the spectrum is reported
                out["mccumber_error"] = str(exc)
            else:
                out["mccumber"] = check.as_dict()
    return out


def _sweep_estimate(state: EstimatorState, core: _SweepCore, scope: str, t: float, counts: _Counts) -> Estimate:
    if core.method == "watch":
        est = _watch_estimate(state, core.inner, scope, t, counts)
    else:
        est = _chopped_estimate(state, core.inner, scope, t, counts)
    if scope == "window":
        return est
    values = dict(est.values)
    fits = core.fits
    sat = fits.get("saturation")
    if sat is not None:
        values["beta_max"] = _q(sat["beta_max"], sat["beta_max_sigma_noise"], sat["beta_max_sigma_systematic"])
        values["p_sat_w"] = _q(sat["p_sat_w"], sat["p_sat_w_sigma_noise"], sat["p_sat_w_sigma_systematic"])
    spec = fits.get("spectrum")
    if spec is not None:
        values["line_centre_m"] = _q(spec["centre_m"], spec["centre_m_sigma"])
        values["gaussian_fwhm_hz"] = _q(spec["gaussian_fwhm_hz"], spec["gaussian_fwhm_hz_sigma"])
        values["lorentzian_fwhm_hz"] = _q(spec["lorentzian_fwhm_hz"], spec["lorentzian_fwhm_hz_sigma"])
    extra = dict(est.extra)
    extra["step"] = {"pump_power_w": state.settings.get("pump_power"),
                     "probe_wavelength_m": state.settings.get("probe_wavelength")}
    extra["points"] = [dict(pt) for pt in core.points]
    extra["fits"] = _plain(fits)
    return dataclasses.replace(est, values=MappingProxyType(values), extra=MappingProxyType(extra))


def _plain(obj):
    """A JSON-friendly copy (mappings to dicts, tuples to lists)."""
    if isinstance(obj, Mapping):
        return {k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    return obj


# ============================================================================================
# dispatch (one table keyed by mode)
# ============================================================================================


def _ingest(state: EstimatorState, core, f: _Frame, clock: _Clock):
    p = state.params
    if state.mode == "watch":
        return _watch_ingest(core, f, clock)
    if state.mode == "chopped":
        return _chopped_ingest(core, f, clock, p)
    if state.mode == "decay":
        return _decay_ingest(core, f, clock, p, state)
    inner, items = (_watch_ingest(core.inner, f, clock) if core.method == "watch"
                    else _chopped_ingest(core.inner, f, clock, p))
    return dataclasses.replace(core, inner=inner), items


def _add(state: EstimatorState, core, item):
    if state.mode == "watch":
        return _watch_add(core, item)
    if state.mode == "chopped":
        return _chopped_add(core, item)
    if state.mode == "decay":
        return _decay_add(core, item)
    add = _watch_add if core.method == "watch" else _chopped_add
    return dataclasses.replace(core, inner=add(core.inner, item))


_ESTIMATORS = {
    "watch": _watch_estimate,
    "chopped": _chopped_estimate,
    "decay": _decay_estimate,
    "sweep": _sweep_estimate,
}


def _reset_window(state: EstimatorState, core):
    if state.mode == "watch":
        return dataclasses.replace(core, win=_BatchStats())
    if state.mode == "chopped":
        return dataclasses.replace(core, win=_ScalarStats(), win_off=_ScalarStats(), win_corr=0.0)
    if state.mode == "decay":
        return dataclasses.replace(core, win=_CurveStats.empty(core.n_bins))
    inner = core.inner
    inner = (dataclasses.replace(inner, win=_BatchStats()) if isinstance(inner, _WatchCore)
             else dataclasses.replace(inner, win=_ScalarStats(), win_off=_ScalarStats(), win_corr=0.0))
    return dataclasses.replace(core, inner=inner)


def _item_counts(items: list) -> tuple[int, int]:
    skipped = sum(1 for it in items if it[1] in ("skip", "no_reference"))
    no_ref = sum(1 for it in items if it[1] == "no_reference")
    return skipped, no_ref


def _sample_counts(f: _Frame, W: int, w_first: int, w_last: int, watch_like: bool) -> list[_Counts]:
    """Per window w_first..w_last: samples seen, unsettled pump-on samples, near-full-scale samples."""
    out = []
    lo, hi = f.i0, f.i0 + f.n
    unsettled = None
    if watch_like:
        mask = f.on & ~f.settled
        if mask.any():
            unsettled = np.bincount((np.flatnonzero(mask) + f.i0) // W - w_first, minlength=w_last - w_first + 1)
    over = None
    if f.over is not None:
        over = np.bincount((np.flatnonzero(f.over) + f.i0) // W - w_first, minlength=w_last - w_first + 1)
    for k, w in enumerate(range(w_first, w_last + 1)):
        seen = min(hi, (w + 1) * W) - max(lo, w * W)
        out.append(_Counts(seen=int(seen),
                           unsettled=int(unsettled[k]) if unsettled is not None else 0,
                           over=int(over[k]) if over is not None else 0))
    return out


# ============================================================================================
# update
# ============================================================================================


def update(state: EstimatorState, block: Block) -> tuple[EstimatorState, list[Estimate]]:
    """Feed one block; returns the new state and the estimates completed by it.

    Detector blocks need ``probe``, ``reference`` and ``pump_monitor`` channels. A block
    without a ``probe`` channel but with ``pump_setpoint`` (A) or ``probe_wavelength`` (m)
    announces a setting (as `with_setting`); any other block is ignored.
    """
    if not isinstance(state, EstimatorState):
        raise ValueError(f"state: expected EstimatorState, got {type(state).__name__}")
    if not isinstance(block, Block):
        raise ValueError(f"block: expected Block, got {type(block).__name__}")
    if PROBE not in block.channels:
        return _setting_block(state, block), []
    frame, clock, pump = _frame(state, block)
    if frame is None:
        return state, []
    core = state.core
    if core is None:  # decay bins need the sample interval
        core = _fresh_core(state.params, state.mode, state.settings, clock)
    st = dataclasses.replace(state, clock=clock, pump=pump, core=core)
    if state.clock is None:
        st = dataclasses.replace(st, window_id=0)
    core, items = _ingest(st, core, frame, clock)
    items.sort(key=lambda it: it[0])
    W = clock.window
    last = frame.i0 + frame.n - 1
    w_first = frame.i0 // W
    w_last = last // W
    per_window = _sample_counts(frame, W, w_first, w_last, _watch_like(st))
    estimates: list[Estimate] = []
    win_counts, cum_counts = st.win_counts, st.cum_counts
    window_id = st.window_id
    k = 0
    # windows that end inside this block are complete once their next sample is processed
    for w in range(window_id, last // W):
        end = (w + 1) * W
        chunk = []
        while k < len(items) and items[k][0] < end:
            chunk.append(items[k])
            k += 1
        for it in chunk:
            core = _add(st, core, it)
        skipped, no_ref = _item_counts(chunk)
        wc = per_window[w - w_first] if w >= w_first else _Counts()
        wc = dataclasses.replace(wc, skipped=skipped, no_reference=no_ref)
        win_counts = win_counts.plus(wc)
        cum_counts = cum_counts.plus(wc)
        if win_counts.seen:
            t_end = clock.time(end - 1)
            est_state = dataclasses.replace(st, core=core)
            make = _ESTIMATORS[st.mode]
            estimates.append(make(est_state, core, "window", t_end, win_counts))
            estimates.append(make(est_state, core, "cumulative", t_end, cum_counts))
        core = _reset_window(st, core)
        win_counts = _Counts()
    window_id = max(window_id, last // W)
    rest = items[k:]
    for it in rest:
        core = _add(st, core, it)
    skipped, no_ref = _item_counts(rest)
    tail = per_window[window_id - w_first] if window_id >= w_first else _Counts()
    tail = dataclasses.replace(tail, skipped=skipped, no_reference=no_ref)
    win_counts = win_counts.plus(tail)
    cum_counts = cum_counts.plus(tail)
    st = dataclasses.replace(st, core=core, window_id=window_id, win_counts=win_counts, cum_counts=cum_counts)
    return st, estimates


def _setting_block(state: EstimatorState, block: Block) -> EstimatorState:
    if block.n == 0:
        return state
    if PUMP_SETPOINT in block.channels:
        current = float(block.column(PUMP_SETPOINT)[-1])
        if state.settings.get("pump_current") != current:
            state = with_setting(state, pump_current=current)
    if WAVELENGTH in block.channels:
        lam = float(block.column(WAVELENGTH)[-1])
        if state.settings.get("probe_wavelength") != lam and lam > 0:
            state = with_setting(state, probe_wavelength=lam)
    return state


def report(state: EstimatorState) -> list[Estimate]:
    """The cumulative estimate of everything so far (the figure to report), as a one-item list.

    Counts the batch being filled (watch, sweep) and, in decay mode, an open decay that already
    covers the fit span; in sweep mode the current step is included among the points and fits.
    Pure: the state is not changed. Empty before the first detector block.
    """
    if not isinstance(state, EstimatorState):
        raise ValueError(f"state: expected EstimatorState, got {type(state).__name__}")
    if state.clock is None or state.core is None:
        return []
    core = state.core
    t = state.clock.time(state.clock.next_index - 1)
    if state.mode == "watch":
        core = _watch_flush(core)
    elif state.mode == "sweep":
        st = _close_step(state)
        core = st.core
        inner = core.inner
        if isinstance(inner, _WatchCore):
            core = dataclasses.replace(core, inner=_watch_flush(inner))
        state = st
    elif state.mode == "decay" and core.open_edge >= 0 and core.open_sums is not None:
        fit_n = core.n_bins * core.bin_n
        if state.clock.next_index - core.open_edge >= fit_n:
            p = state.params
            tail0 = int(math.ceil(p.decay_tail_start / state.clock.dt))
            item = _finish_decay(state, core, core.open_edge, state.clock.next_index, core.open_sums, fit_n, tail0,
                                 state.clock.dt)
            core = _decay_add(core, item)
    make = _ESTIMATORS[state.mode]
    return [make(dataclasses.replace(state, core=core), core, "cumulative", t, state.cum_counts)]
