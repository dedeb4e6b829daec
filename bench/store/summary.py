"""The figures of a stored run: final estimates, the simulator's truth over the same span, the
guard's trips with their latency and acknowledgement. Used by `gainbench summary` (and the
report): pure reading, never writes."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from bench import physics
from bench.config import BenchConfig
from bench.estimator.params import EstimatorParams
from bench.records import Estimate, Event, Quantity
from bench.store import RunReader

#: The estimate names `gainbench summary --json` reports (and the truth's, for simulated runs).
SUMMARY_ESTIMATES = ("ln_ratio", "gain_db", "gain_coefficient_per_cm", "n2_per_m3", "beta", "tau_s")


def final_estimate(reader: RunReader, analysis_id: int | None = None) -> Estimate | None:
    return reader.final_estimate(analysis_id)


#: What the truth rows of a simulated run hold beyond the first recorded fields: the medium's
#: own probe transmission, pumped and unpumped, its gain coefficient (`BenchModel.truth`).
MEDIUM_KEYS = ("ln_t_pumped", "ln_t_unpumped", "gain_per_m")


def _pumped_rows(
    rows: list[dict[str, Any]], t0: float, t1: float, settle: Callable[[float], float] | None = None
) -> list[dict[str, Any]]:
    """Truth rows in [t0, t1] taken while the pump was on (at least half its largest power there).

    With ``settle`` (pump power in W -> s) and rows that say how long the medium's inputs had
    been constant (``inputs_steady_s``), only rows at least that long after the last change
    count: the settled state that the estimator's own settle windows select, not a row caught
    on a pump edge of a chopped run or a sweep step (if none is settled, all pumped rows count).
    """
    t = np.array([r["t"] for r in rows])
    sel = (t >= t0 - 1e-9) & (t <= t1 + 1e-9)
    pump = np.array([r.get("pump_w", r.get("pump_W", 0.0)) for r in rows])
    if sel.any() and pump[sel].max() > 0:
        sel &= pump >= 0.5 * pump[sel].max()  # the pumped part (chopped runs alternate)
    if settle is not None and sel.any() and all("inputs_steady_s" in r for r in rows):
        steady = np.array([r["inputs_steady_s"] >= settle(p) for r, p in zip(rows, pump)])
        if (sel & steady).any():
            sel &= steady
    return [r for r, s in zip(rows, sel) if s]


def _settle_rule(cfg: BenchConfig) -> Callable[[float], float]:
    """The rise settle window (s) at a pump power (W): `EstimatorParams.rise_settle`."""
    params = EstimatorParams.from_config(cfg)
    return lambda power: params.rise_settle(power if power > 0 else None)


def _rows_at_power(rows: list[dict[str, Any]], power: float | None) -> list[dict[str, Any]]:
    """Truth rows whose pump power is within 1 % of ``power`` (W)."""
    if power is None or not power > 0:
        return []
    return [r for r in rows if abs(r.get("pump_w", r.get("pump_W", 0.0)) - power) <= 0.01 * power]


def truth_figures(pick: list[dict[str, Any]], cfg: BenchConfig) -> tuple[dict[str, float], str] | None:
    """(figures keyed as `SUMMARY_ESTIMATES`, where they come from) of some truth rows.

    The median, not the mean: a truth sample caught during a pump edge (chopped and decay runs
    sample the truth at random phases) must not pull the figure. The figures are what the
    simulated medium itself knows: ``ln_ratio`` (its pumped over unpumped transmission), the
    net gain from the probe's true single-pass transmission, the gain coefficient, the
    absolute length-averaged N2 and beta, the lifetime. Rows recorded before the medium's
    transmission was stored give the gain figures from the medium's absolute ``<N2>`` by
    Beer-Lambert, ``ln T = ((sigma_e + sigma_a) <N2> - sigma_a N) L`` (exact for the slice model,
    whose ln T is linear in the slices' N2), and without ``n2_avg`` from ln R as the estimator
    would (which cannot show the estimator's own bias; the source says so).
    """
    if not pick:
        return None
    med = {
        k: float(np.median([r[k] for r in pick]))
        for k in ("ln_ratio", "beta", "n2_avg", "tau", "n_total", "length") + MEDIUM_KEYS
        if all(k in r for r in pick)
    }
    if "ln_ratio" not in med:
        return None
    s = cfg.sample
    se, sa = s.sigma.probe_emission, s.sigma.probe_absorption
    length = med.get("length", s.length)
    n_total = med.get("n_total", s.n_total)
    if "ln_t_pumped" in med and "gain_per_m" in med and "n2_avg" in med:
        source = "medium: its own probe transmission and populations"
        ln_t, g, n2 = med["ln_t_pumped"], med["gain_per_m"], med["n2_avg"]
    elif "n2_avg" in med:
        source = (
            "medium: its absolute <N2> (run recorded before the medium's transmission was stored; "
            "gain by Beer-Lambert from <N2>)"
        )
        n2 = med["n2_avg"]
        g = float(physics.gain_coefficient(n2, n_total, se, sa))
        ln_t = g * length
    else:
        source = "the estimator's formulas of the true ln R (run recorded without the medium's populations)"
        n2 = float(physics.excited_density_from_ln_ratio(med["ln_ratio"], se, sa, length))
        g = float(physics.gain_coefficient(n2, n_total, se, sa))
        ln_t = g * length
    out = {
        "ln_ratio": med["ln_ratio"],
        "gain_db": float(physics.ln_gain_to_db(ln_t)),
        "gain_coefficient_per_cm": float(physics.per_m_to_per_cm(g)),
        "n2_per_m3": n2,
        "beta": med.get("beta", n2 / n_total),
    }
    if "tau" in med:
        out["tau_s"] = med["tau"]
    return out, source


def truth_over(
    reader: RunReader, cfg: BenchConfig, estimate: Estimate | None, span: tuple[float, float] | None = None
) -> tuple[dict[str, float], str] | None:
    """The simulator's truth over the pumped stretch the estimate covers (or over ``span``,
    run-clock seconds), with its source (`truth_figures`)."""
    rows = reader.truth()
    if not rows:
        return None
    if span is not None:
        t0, t1 = span
    elif estimate is not None and estimate.n_samples > 0:
        t0, t1 = -math.inf, estimate.t
    else:
        t0, t1 = -math.inf, math.inf
    settle = _settle_rule(cfg)
    pick = _pumped_rows(rows, t0, t1, settle)
    if not pick and span is None:
        pick = _pumped_rows(rows, -math.inf, math.inf, settle)
    return truth_figures(pick, cfg)


def truth_over_rows(rows: list[dict[str, Any]], cfg: BenchConfig) -> tuple[dict[str, float], str] | None:
    """`truth_figures` of the pumped, settled rows among ``rows``."""
    return truth_figures(_pumped_rows(rows, -math.inf, math.inf, _settle_rule(cfg)), cfg)


def settled_truth_over_rows(
    rows: list[dict[str, Any]], cfg: BenchConfig
) -> tuple[dict[str, float], str] | None:
    """`truth_figures` of the pumped rows among ``rows`` that were settled, or None if none was.

    For a short step of a chopped run (a spectrum's wavelength), where the truth poller may
    catch no settled row at all: then there is no truth of the pumped state, rather than the
    truth of rows caught on a pump edge."""
    settle = _settle_rule(cfg)
    steady = [
        r
        for r in _pumped_rows(rows, -math.inf, math.inf)
        if "inputs_steady_s" in r and r["inputs_steady_s"] >= settle(r.get("pump_w", r.get("pump_W", 0.0)))
    ]
    return truth_figures(steady, cfg) if steady else None


def _q(q: Quantity) -> dict[str, float]:
    return {
        "value": q.value,
        "sigma": q.sigma,
        "sigma_noise": q.sigma_noise,
        "sigma_systematic": q.sigma_systematic,
    }


def _step_span(point: dict[str, Any]) -> tuple[float, float] | None:
    t0, t1 = point.get("t_start"), point.get("t_end")
    return (float(t0), float(t1)) if t0 is not None and t1 is not None else None


def sweep_steps(final: Estimate, reader: RunReader | None, cfg: BenchConfig) -> list[dict[str, Any]]:
    """One entry per sweep step (point) of the final estimate, each with the truth of its own
    time span on a simulated run (``reader`` given)."""
    out = []
    for pt in final.extra.get("points", []) or []:
        step: dict[str, Any] = {
            "pump_current_a": pt.get("pump_current_a"),
            "pump_power_w": pt.get("pump_power_w"),
        }
        if pt.get("probe_wavelength_m") is not None:
            step["probe_wavelength_m"] = pt["probe_wavelength_m"]
        if "beta" in pt:
            step["beta"] = {
                "value": pt["beta"],
                "sigma": pt.get("beta_sigma"),
                "sigma_noise": pt.get("beta_sigma_noise"),
            }
        step["ln_ratio"] = {
            "value": pt["ln_ratio"],
            "sigma": pt["ln_ratio_sigma"],
            "sigma_noise": pt["ln_ratio_sigma"],
        }
        span = _step_span(pt)
        if span is not None:
            step["t_start"], step["t_end"] = span
        if reader is not None:
            if span is not None:
                found = truth_over(reader, cfg, None, span)
            else:  # recorded before points had spans: the truth rows at the step's pump power
                found = truth_figures(_rows_at_power(reader.truth(), pt.get("pump_power_w")), cfg)
                step["truth_by"] = "pump power (the run's points have no time spans)"
            if found is not None:
                truth, _ = found
                step["truth"] = {k: {"value": truth[k]} for k in ("beta", "ln_ratio") if k in truth}
            else:
                step["truth"] = None  # no truth row inside the step
        out.append(step)
    return out


def sweep_fit(final: Estimate) -> dict[str, Any]:
    """The fitted figures of a sweep (``beta_max``, ``p_sat_w`` as {value, sigma, ...})."""
    out: dict[str, Any] = {k: _q(final.values[k]) for k in ("beta_max", "p_sat_w") if k in final.values}
    sat = (final.extra.get("fits") or {}).get("saturation")
    if out and sat:
        out["model"] = sat.get("model")
        out["chi2_reduced"] = sat.get("chi2_reduced")
    return out


def lockin_steps(final: Estimate) -> list[dict[str, Any]]:
    """One entry per modulation frequency of a lock-in run: the frequency, the mean X, Y (V
    rms) and DC level (V), the phase and the model's, the ratio (X + iY) / DC with the sigma of
    each component, ln R with its noise sigma, and the readings' time span. No per-step truth:
    the medium's CW state is the run's (``truth``), and its state during a step is modulated."""
    out = []
    for pt in final.extra.get("points", []) or []:
        step: dict[str, Any] = {
            k: pt.get(k)
            for k in (
                "frequency_hz",
                "x_v",
                "y_v",
                "dc_v",
                "phase_rad",
                "phase_sigma_rad",
                "model_phase_rad",
                "n_readings",
                "n_eff",
                "overloads",
            )
        }
        step["ratio"] = {"re": pt.get("ratio_re"), "im": pt.get("ratio_im"), "sigma": pt.get("ratio_sigma")}
        step["ln_ratio"] = {
            "value": pt["ln_ratio"],
            "sigma": math.hypot(pt["ln_ratio_sigma"], pt.get("ln_ratio_sys", 0.0)),
            "sigma_noise": pt["ln_ratio_sigma"],
            "sigma_systematic": pt.get("ln_ratio_sys", 0.0),
        }
        span = _step_span(pt)
        if span is not None:
            step["t_start"], step["t_end"] = span
        out.append(step)
    return out


def lockin_fit(final: Estimate) -> dict[str, Any]:
    """The lifetime fit of a lock-in frequency series (SI), or {} without one."""
    fit = (final.extra.get("fits") or {}).get("lifetime")
    if not fit:
        return {}
    return {
        "tau_s": {"value": fit["tau"], "sigma": fit["tau_sigma"]},
        "pump_rate_per_s": {"value": fit["pump_rate"], "sigma": fit["pump_rate_sigma"]},
        "ln_ratio": {"value": fit["ln_ratio_on"], "sigma": fit["ln_ratio_on_sigma"]},
        "chi2": fit["chi2"],
        "dof": fit["dof"],
    }


#: What a pulsed run's summary adds to `SUMMARY_ESTIMATES`.
PULSED_ESTIMATES = ("decay_time_s", "stored_energy_j_per_m3", "transmission_before")


def pulsed_truth(rows: list[dict[str, Any]], cfg: BenchConfig) -> tuple[dict[str, float], str] | None:
    """The simulated medium's own figures at the peak of its pump pulses (the truth rows'
    pulse fields, `simulated_instruments` ``SIM:TRUTH:PULSE?``): the median over the rows of
    pulses at the run's pulse power (at least half the largest: not one from the pump's
    ramp), so that each figure is that of a steady pulse. ``n2_per_m3``, ``beta``,
    ``ln_ratio`` at the pulse's end, ``tau_s`` the medium's lifetime, the gain figures from the
    peak <N2> by Beer-Lambert, ``stored_energy_j_per_m3`` = h c / lambda_zl x <N2> with
    ``sample.zero_line`` (when given)."""
    good = [r for r in rows if math.isfinite(r.get("n2_peak", math.nan)) and r.get("pulses", 0) > 0]
    if not good:
        return None
    top = max(r.get("pulse_pump_w", 0.0) for r in good)
    pick = [r for r in good if r.get("pulse_pump_w", 0.0) >= 0.5 * top] if top > 0 else good
    med = {
        k: float(np.median([r[k] for r in pick])) for k in ("n2_peak", "beta_peak", "ln_ratio_peak", "tau")
    }
    s = cfg.sample
    se, sa = s.sigma.probe_emission, s.sigma.probe_absorption
    g = float(physics.gain_coefficient(med["n2_peak"], s.n_total, se, sa))
    out = {
        "ln_ratio": med["ln_ratio_peak"],
        "gain_db": float(physics.ln_gain_to_db(g * s.length)),
        "gain_coefficient_per_cm": float(physics.per_m_to_per_cm(g)),
        "n2_per_m3": med["n2_peak"],
        "beta": med["beta_peak"],
        "tau_s": med["tau"],
    }
    if s.zero_line is not None:
        out["stored_energy_j_per_m3"] = float(physics.photon_energy(s.zero_line)) * med["n2_peak"]
    return out, "medium: its own populations at the end of its pump pulses (median over the pulses polled)"


def trips(events: list[Event]) -> list[dict[str, Any]]:
    """Each trip with its reason, latency, and the acknowledgement that cleared it."""
    out: list[dict[str, Any]] = []
    for ev in events:
        if ev.kind == "trip":
            d = dict(ev.data)
            out.append(
                {
                    "t": ev.t,
                    "reason": d.get("reason", ev.text),
                    "condition": d.get("condition"),
                    "latency_s": d.get("latency_s"),
                    "seen_at": d.get("seen_at"),
                    "acknowledged_by": None,
                    "acknowledged_at": None,
                }
            )
        elif ev.kind == "guard" and out and out[-1]["acknowledged_at"] is None:
            d = dict(ev.data)
            if d.get("from") == "tripped" and d.get("to") == "safe":
                out[-1]["acknowledged_by"] = ev.who
                out[-1]["acknowledged_at"] = ev.t
    return out


def summary(reader: RunReader, cfg: BenchConfig, analysis_id: int | None = None) -> dict[str, Any]:
    final = final_estimate(reader, analysis_id)
    estimates = {}
    if final is not None:
        for k in SUMMARY_ESTIMATES + (PULSED_ESTIMATES if final.mode == "pulsed" else ()):
            q = final.values.get(k)
            if q is not None:
                estimates[k] = _q(q)
    out: dict[str, Any] = {
        "run_id": reader.run_id,
        "status": reader.status,
        "mode": final.mode if final is not None else reader.meta.get("mode"),
        "sample": cfg.sample.label,
        "simulated": bool(reader.meta.get("simulated")),
        "analysis_id": analysis_id,
        "estimates": estimates,
        "flags": sorted(final.flags) if final is not None else [],
        "n_samples": final.n_samples if final is not None else 0,
    }
    simulated = out["simulated"]
    span = None
    points: list = []
    if final is not None and final.mode == "sweep":
        out["steps"] = sweep_steps(final, reader if simulated else None, cfg)
        out["fit"] = sweep_fit(final)
        points = final.extra.get("points") or []
        # the top-level figures are those of the last step: its truth is that step's
        span = _step_span(points[-1]) if points else None
    if final is not None and final.mode == "lockin" and final.extra.get("points"):
        out["steps"] = lockin_steps(final)
        out["fit"] = lockin_fit(final)
    if final is not None and final.mode == "pulsed":
        out["shots"] = int(final.extra.get("shots", 0))
    if final is not None and final.mode == "spectrum":
        from bench.store.spectrum_summary import spectrum_fits, spectrum_list

        out["spectrum"] = spectrum_list(final, reader if simulated else None, cfg, settled_truth_over_rows)
        fits = spectrum_fits(final)
        for key in ("mccumber", "error"):
            if key in fits:
                out[f"spectrum_{key}"] = fits[key]
    truth = truth_over(reader, cfg, final, span) if simulated else None
    if simulated and final is not None and final.mode == "pulsed":
        truth = pulsed_truth(reader.truth(), cfg)
    if simulated and final is not None and final.mode == "sweep" and span is None:
        # recorded before points had spans: the truth at the pump power of the final figures' step
        power = (final.extra.get("step") or {}).get("pump_power_w")
        truth = truth_figures(_rows_at_power(reader.truth(), power), cfg)
    if truth is not None:
        figures, source = truth
        out["truth"] = {k: {"value": v} for k, v in figures.items()}
        out["truth_source"] = source
    events = reader.events()
    out["trips"] = trips(events)
    out["events"] = {k: sum(1 for e in events if e.kind == k) for k in sorted({e.kind for e in events})}
    out["drops"] = sum(int(e.data.get("blocks", 0)) for e in events if e.kind == "drop")
    return out
