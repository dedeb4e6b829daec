"""`gainbench summary RUN`: the final estimates of a run, its truth when simulated, its trips."""

from __future__ import annotations

import argparse
import json
import math

from bench.run.replay import run_config
from bench.store import RunReader, resolve_run
from bench.store.summary import summary

NAME = "summary"
HELP = "final estimates of a run with uncertainties (and the simulator's truth), trips, events"

LABELS = {
    "ln_ratio": ("ln R", 1.0, ""),
    "gain_db": ("single-pass gain", 1.0, "dB"),
    "gain_coefficient_per_cm": ("gain coefficient", 1.0, "cm^-1"),
    "n2_per_m3": ("<N2>", 1e-6, "cm^-3"),
    "beta": ("excited fraction beta", 1.0, ""),
    "tau_s": ("lifetime tau", 1e3, "ms"),
    # pulsed runs (`bench.store.summary.PULSED_ESTIMATES`)
    "stored_energy_j_per_m3": ("stored energy density", 1e-6, "J/cm^3"),
    "transmission_before": ("transmission before pulse", 1.0, ""),
}


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", help="run id (or a unique prefix of one) or run file path")
    parser.add_argument("--logs", metavar="DIR", default="logs", help="run store directory (default logs)")
    parser.add_argument(
        "--analysis", type=int, help="analysis id (default: the live one); see --json 'analyses'"
    )
    parser.add_argument("--json", action="store_true", help="print JSON")


def run(args: argparse.Namespace) -> int:
    path = resolve_run(args.run, args.logs)
    with RunReader(path) as reader:
        cfg = run_config(reader)
        out = summary(reader, cfg, args.analysis)
        out["analyses"] = reader.analyses()
        speed = reader.meta.get("speed") or 1.0
    if args.json:
        print(json.dumps(out, indent=2, default=_json_default))
        return 0
    print(
        f"run {out['run_id']}  ({out['status']}, mode {out['mode']}{', SIMULATED' if out['simulated'] else ''})"
    )
    print(f"sample: {out['sample']}")
    if not out["estimates"]:
        print("no estimate (the pump never ran long enough, or no baseline was taken)")
    truth = out.get("truth", {})
    for key, (label, scale, unit) in LABELS.items():
        q = out["estimates"].get(key)
        if q is None:
            continue
        line = (
            f"  {label:<22} {q['value'] * scale:>12.5g} ± {q['sigma'] * scale:<9.3g} {unit:<6}"
            f" (noise {q['sigma_noise'] * scale:.2g}, systematic {q['sigma_systematic'] * scale:.2g})"
        )
        if key in truth:
            line += f"   truth {truth[key]['value'] * scale:.5g}"
        print(line)
    if out.get("truth_source"):
        print(f"  truth from the {out['truth_source']}")
    if out["flags"]:
        print(f"  flags: {', '.join(out['flags'])}")
    _print_sweep(out)
    for t in out["trips"]:
        lat = t.get("latency_s")
        lat_text = "unknown" if lat is None else f"{lat * 1e3:.1f} ms"
        if lat is not None and speed != 1.0:
            lat_text += f" of run clock ({lat / speed * 1e3:.2f} ms real, speed x{speed:g})"
        ack = (
            f"acknowledged by {t['acknowledged_by']} at t = {t['acknowledged_at']:.3f} s"
            if t.get("acknowledged_at") is not None
            else "NOT acknowledged"
        )
        print(f"  TRIP at t = {t['t']:.3f} s: {t['reason']}; latency {lat_text}; {ack}")
    counts = ", ".join(f"{k} {v}" for k, v in out["events"].items())
    print(f"  events: {counts}; drops {out['drops']}")
    return 0


def _print_lockin_steps(out: dict) -> None:
    """The modulation frequencies of a lock-in run (one line each) and the lifetime fit."""
    steps = out["steps"]
    print(f"  modulation frequencies: {len(steps)}")
    for st in steps:
        q = st["ln_ratio"]
        print(
            f"    {st['frequency_hz']:7.4g} Hz  X {st['x_v']:+.4e} V  Y {st['y_v']:+.4e} V  "
            f"phase {st['phase_rad']:+.5f} rad (model {st['model_phase_rad']:+.5f})  "
            f"ln R {q['value']:.6f} ± {q['sigma']:.2g}"
        )
    fit = out.get("fit") or {}
    if fit.get("tau_s"):
        tau = fit["tau_s"]
        scaled = ""
        if fit["dof"] > 0 and fit["chi2"] > fit["dof"]:
            scaled = f" (sigmas scaled by sqrt(chi-square / dof) = {math.sqrt(fit['chi2'] / fit['dof']):.2g})"
        print(
            f"  lifetime fit: tau {tau['value'] * 1e3:.5g} ± {tau['sigma'] * 1e3:.2g} ms, "
            f"chi-square {fit['chi2']:.3g} for {fit['dof']} degrees of freedom{scaled}"
        )


def _print_sweep(out: dict) -> None:
    """The steps of a sweep (one line each) and its fitted figures."""
    steps = out.get("steps")
    if steps is None:
        return
    if out.get("mode") == "lockin":
        _print_lockin_steps(out)
        return
    print(f"  sweep: {len(steps)} steps")
    for k, st in enumerate(steps, 1):
        cur = st.get("pump_current_a")
        pw = st.get("pump_power_w")
        where = (f"{cur:6.3f} A" if cur is not None else "     - A") + (
            f" {pw:7.3f} W" if pw is not None else ""
        )
        b = st.get("beta")
        b_text = f"beta {b['value']:.6f} ± {b['sigma']:.2g} (noise {b['sigma_noise']:.2g})" if b else "beta -"
        q = st["ln_ratio"]
        line = f"    step {k}: {where}  ln R {q['value']:.6f} ± {q['sigma']:.2g}  {b_text}"
        truth = st.get("truth")
        if truth and "beta" in truth:
            line += f"   truth beta {truth['beta']['value']:.6f}"
        print(line)
    fit = out.get("fit") or {}
    for key, label, unit in (("beta_max", "fitted beta_max", ""), ("p_sat_w", "fitted p_sat", "W")):
        q = fit.get(key)
        if q is not None:
            print(
                f"  {label:<22} {q['value']:>12.6g} ± {q['sigma']:<9.3g} {unit:<6}"
                f" (noise {q['sigma_noise']:.2g}, systematic {q['sigma_systematic']:.2g})"
            )
    if fit.get("model"):
        print(f"  saturation model: {fit['model']} sample, reduced chi-square {fit['chi2_reduced']:.3g}")


def _json_default(o):
    if isinstance(o, float) and not math.isfinite(o):
        return None
    return str(o)
