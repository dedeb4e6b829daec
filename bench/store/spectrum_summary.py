"""The `spectrum` list of `gainbench summary --json` for a spectrum run: one entry per measured
wavelength (`bench.estimator.spectrum_points`), each with the simulator's truth over its own
step on a simulated run. Pure reading."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from bench.config import BenchConfig
from bench.records import Estimate
from bench.store import RunReader

#: The figures of each entry, each {value, sigma, sigma_noise, sigma_systematic}.
KEYS = ("wavelength_m", "sigma_a_m2", "sigma_e_m2", "sigma_g_m2", "ln_ratio", "beta")


def spectrum_fits(final: Estimate | None) -> dict[str, Any]:
    """The spectrum figures of a spectrum run's final estimate ({} for another run)."""
    if final is None or final.mode != "spectrum":
        return {}
    return (final.extra.get("fits") or {}).get("spectrum") or {}


def _truth(
    rows: list[dict[str, Any]], entry: dict[str, Any], cfg: BenchConfig, truth_over_rows: Callable
) -> dict[str, Any] | None:
    t0, t1 = entry.get("t_start"), entry.get("t_end")
    lam = entry["wavelength_m"]["value"]
    if t0 is None or t1 is None:
        return None
    here = [
        r
        for r in rows
        if t0 - 1e-9 <= r["t"] <= t1 + 1e-9 and abs(r.get("probe_wavelength", np.nan) - lam) <= 1e-6 * lam
    ]
    if not here:
        return None
    out: dict[str, Any] = {
        "sigma_a_m2": {"value": float(np.median([r["sigma_a"] for r in here]))},
        "sigma_e_m2": {"value": float(np.median([r["sigma_e"] for r in here]))},
    }
    found = truth_over_rows(here, cfg)
    if found is not None:
        figures, _ = found
        out.update({k: {"value": figures[k]} for k in ("beta", "ln_ratio") if k in figures})
    return out


def spectrum_list(
    final: Estimate | None,
    reader: RunReader | None,
    cfg: BenchConfig,
    truth_over_rows: Callable | None = None,
) -> list[dict[str, Any]]:
    """One entry per wavelength; with ``reader`` (a simulated run) and ``truth_over_rows`` (the
    medium's figures from truth rows, `bench.store.summary.truth_over_rows`, given by the caller
    so that this module does not import the summary that imports it) each with its truth."""
    fits = spectrum_fits(final)
    rows = reader.truth() if reader is not None else []
    out = []
    for e in fits.get("entries", []):
        entry: dict[str, Any] = {k: dict(e[k]) for k in KEYS}
        entry["anchor"] = bool(e.get("anchor"))
        entry["t_start"], entry["t_end"] = e.get("t_start"), e.get("t_end")
        if reader is not None and truth_over_rows is not None:
            entry["truth"] = _truth(rows, e, cfg, truth_over_rows)
        out.append(entry)
    return out
