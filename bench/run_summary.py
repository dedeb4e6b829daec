"""The figures of a stored run: final estimates, the simulator's truth over the same span, the
guard's trips with their latency and acknowledgement. Used by `gainbench summary` (and the
report): pure reading, never writes."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from bench import physics
from bench.config import BenchConfig
from bench.records import Estimate, Event
from bench.runstore import RunReader

#: The estimate names `gainbench summary --json` reports (and the truth's, for simulated runs).
SUMMARY_ESTIMATES = ("ln_ratio", "gain_db", "gain_coefficient_per_cm", "n2_per_m3", "beta", "tau_s")


def final_estimate(reader: RunReader, analysis_id: int | None = None) -> Estimate | None:
    return reader.final_estimate(analysis_id)


def truth_over(reader: RunReader, cfg: BenchConfig, estimate: Estimate | None) -> dict[str, float] | None:
    """The simulator's truth averaged over the pumped stretch the estimate covers."""
    rows = reader.truth()
    if not rows:
        return None
    t = np.array([r["t"] for r in rows])
    if estimate is not None and estimate.n_samples > 0:
        span = float(estimate.extra.get("span_s", 0.0)) if isinstance(estimate.extra, dict) else 0.0
        t1 = estimate.t
        t0 = t1 - span if span > 0 else -math.inf
        sel = (t >= t0) & (t <= t1 + 1e-9)
    else:
        sel = np.ones(t.size, bool)
    pump = np.array([r.get("pump_w", r.get("pump_W", 0.0)) for r in rows])
    if sel.any() and pump[sel].max() > 0:
        sel &= pump >= 0.5 * pump[sel].max()  # the pumped part (chopped runs alternate)
    if not sel.any():
        sel = pump >= 0.5 * pump.max() if pump.max() > 0 else np.ones(t.size, bool)
    pick = [r for r, s in zip(rows, sel) if s]
    # The median, not the mean: a truth sample caught during a pump edge (chopped and decay
    # runs sample the truth at random phases) must not pull the figure.
    mean = {k: float(np.median([r[k] for r in pick])) for k in ("ln_ratio", "beta", "n2_avg", "tau", "n_total", "length")
            if all(k in r for r in pick)}
    if "ln_ratio" not in mean:
        return None
    s = cfg.sample
    length = mean.get("length", s.length)
    n_total = mean.get("n_total", s.n_total)
    n2 = mean.get("n2_avg", mean.get("beta", 0.0) * n_total)
    g_lin = float(physics.net_gain(mean["ln_ratio"], s.sigma.probe_absorption, n_total, length))
    out = {
        "ln_ratio": mean["ln_ratio"],
        "gain_db": float(physics.gain_db(g_lin)),
        "gain_coefficient_per_cm": float(physics.per_m_to_per_cm(
            physics.gain_coefficient(n2, n_total, s.sigma.probe_emission, s.sigma.probe_absorption))),
        "n2_per_m3": n2,
        "beta": mean.get("beta", n2 / n_total),
    }
    if "tau" in mean:
        out["tau_s"] = mean["tau"]
    return out


def trips(events: list[Event]) -> list[dict[str, Any]]:
    """Each trip with its reason, latency, and the acknowledgement that cleared it."""
    out: list[dict[str, Any]] = []
    for ev in events:
        if ev.kind == "trip":
            d = dict(ev.data)
            out.append({"t": ev.t, "reason": d.get("reason", ev.text), "condition": d.get("condition"),
                        "latency_s": d.get("latency_s"), "seen_at": d.get("seen_at"),
                        "acknowledged_by": None, "acknowledged_at": None})
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
        for k in SUMMARY_ESTIMATES:
            q = final.values.get(k)
            if q is not None:
                estimates[k] = {"value": q.value, "sigma": q.sigma, "sigma_noise": q.sigma_noise,
                                "sigma_systematic": q.sigma_systematic}
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
    truth = truth_over(reader, cfg, final) if out["simulated"] else None
    if truth is not None:
        out["truth"] = {k: {"value": v} for k, v in truth.items()}
    events = reader.events()
    out["trips"] = trips(events)
    out["events"] = {k: sum(1 for e in events if e.kind == k) for k in sorted({e.kind for e in events})}
    out["drops"] = sum(int(e.data.get("blocks", 0)) for e in events if e.kind == "drop")
    return out
