"""Spectrum mode: the tunable probe steps through wavelengths; at each the pump is chopped.

Each wavelength is one step, announced as a sweep's are (`bench.estimator.stream.with_setting`
with ``probe_wavelength``, or a wavelength block's channel), and measured as in chopped mode:
the pump-off half-periods give the unpumped level ``S_off`` (their mean, with its standard
error from their scatter) and each off/on/off triple a pump-induced ``ln R`` in which slow
drift cancels. Closing a step adds its point (a sweep point plus ``ln_s_off`` and its
sigma); the points become cross-sections at each wavelength in
`bench.estimator.spectrum_points` (Beer-Lambert absorption calibrated at the bench
wavelength, emission from ln R at the excited fraction measured there, the gain
cross-section family and the McCumber check against ``sample.zero_line``). A run starts and
ends at the bench file's probe wavelength (`gainbench record --mode spectrum`), the anchors.

References: O. Svelto, *Principles of Lasers*, 5th ed., 2010 (Beer-Lambert, rate equations);
D. E. McCumber, Phys. Rev. 134, A299 (1964); S. A. Payne et al., IEEE J. Quantum Electron. 28,
2619 (1992) (reciprocity applied to measured spectra).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

from bench.estimator.mode import Mode
from bench.estimator.modes import chopped, sweep
from bench.estimator.modes.sweep import SweepCore
from bench.estimator.spectrum_points import spectrum_entries
from bench.estimator.state import Counts, EstimatorState
from bench.estimator.stats import ScalarStats
from bench.records import Estimate

__all__ = ["MODE"]


@dataclass(frozen=True)
class SpectrumCore(SweepCore):
    """A sweep's core plus the step's unpumped level: the pump-off parts that follow a real
    pump-off edge (their residual gain decay corrected) once the step has a full cycle, so that
    no part cut short by the wavelength change counts."""

    off: ScalarStats = ScalarStats()


def _new_core(params, settings: Mapping[str, Any], clock) -> SpectrumCore:
    return SpectrumCore(method="chopped", inner=chopped.MODE.new_core(params, settings, clock))


def _restart(state: EstimatorState) -> SpectrumCore:
    core = state.core
    inner = chopped.MODE.new_core(state.params, state.settings, state.clock)
    if not isinstance(core, SpectrumCore):
        return _new_core(state.params, state.settings, state.clock)
    return dataclasses.replace(core, inner=inner, off=ScalarStats())


def add(core: SpectrumCore, item) -> SpectrumCore:
    inner = chopped.MODE.add(core.inner, item)
    off = core.off
    if isinstance(item, chopped.OffLevel) and item.segment.after_edge and core.inner.cum.k >= 1:
        seg = item.segment
        off = off.add(seg.mean * math.exp(-core.inner.cum.mean() * seg.residual), seg.n)
    return dataclasses.replace(core, inner=inner, off=off)


def _point(state: EstimatorState, core: SpectrumCore) -> dict[str, Any] | None:
    point = sweep._make_point(state, core)
    if point is None:
        return None
    off = core.off
    if off.k >= 2 and off.mean() > 0:
        point["ln_s_off"] = math.log(off.mean())
        point["ln_s_off_sigma"] = off.error() / off.mean()
        point["n_off_levels"] = off.k
    return point


def close_step(state: EstimatorState) -> EstimatorState:
    """Close the current wavelength into a point and recompute the spectrum."""
    core = state.core
    if not isinstance(core, SweepCore):
        return state
    point = _point(state, core)
    if point is None:
        return state
    points = core.points + (MappingProxyType(point),)
    fits = MappingProxyType({"spectrum": spectrum_entries(state.params, points)})
    return dataclasses.replace(state, core=dataclasses.replace(core, points=points, fits=fits))


def flush(state: EstimatorState) -> EstimatorState:
    """The open step among the points (for `report`), its open part counted."""
    st = close_step(state)
    core = st.core
    inner = chopped.MODE.flush(dataclasses.replace(st, core=core.inner)).core
    return dataclasses.replace(st, core=dataclasses.replace(core, inner=inner))


def estimate(state: EstimatorState, core: SweepCore, scope: str, t: float, counts: Counts) -> Estimate:
    est = chopped.MODE.estimate(state, core.inner, scope, t, counts)
    if scope == "window":
        return est
    extra = dict(est.extra)
    extra["step"] = {"probe_wavelength_m": state.settings.get("probe_wavelength")}
    extra["points"] = [dict(pt) for pt in core.points]
    extra["fits"] = sweep._plain(core.fits)
    flags = set(est.flags)
    spec = core.fits.get("spectrum", {})
    if spec.get("mccumber", {}).get("far_from_zero_line_m"):
        flags.add("mccumber_far_from_zero_line")
    return dataclasses.replace(est, extra=MappingProxyType(extra), flags=frozenset(flags))


MODE = Mode(
    name="spectrum",
    new_core=_new_core,
    ingest=sweep.ingest,
    add=add,
    reset_window=sweep.reset_window,
    estimate=estimate,
    flush=flush,
    settle=lambda params, settings: chopped.MODE.settle(params, settings),
    pump_steady=lambda settings: False,
    words="spectrum: probe wavelength in steps, pump chopped (cross-section spectra)",
    cli_words="spectrum: probe wavelength steps (--wavelengths), each chopped",
    describe="spectrum, {steps} wavelengths of {dwell:g} s, each chopped at {chop_ms:g} ms",
    timing=chopped.TIMING,
    period="chop",
    steps_wavelength=True,
    restart=_restart,
    close_step=close_step,
)
