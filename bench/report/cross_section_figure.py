"""The cross-section spectra of a spectrum run: sigma_a and sigma_e with their uncertainty
bands, and the family of gain cross-sections sigma_g(lambda, beta) = beta sigma_e - (1 - beta)
sigma_a (Svelto, *Principles of Lasers*, ch. 2). Plain data in, a Figure (or None) out."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from matplotlib import colormaps, rc_context
from matplotlib.figure import Figure

from bench.records import Estimate
from bench.report.figure_style import BLACK, BLUE, GREY, RC, VERMILLION, new_figure, plain

UNIT = 1e-24  # m^2 per 1e-20 cm^2


def _spectrum(estimate: Estimate | None) -> Mapping | None:
    if estimate is None or estimate.mode != "spectrum" or not isinstance(estimate.extra, Mapping):
        return None
    spec = (estimate.extra.get("fits") or {}).get("spectrum")
    if not isinstance(spec, Mapping) or len(spec.get("entries") or ()) < 2:
        return None
    return spec


def cross_section_figure(estimate: Estimate | None, *, title: str) -> Figure | None:
    """sigma_a, sigma_e (±2 sigma bands) and the gain cross-section family, against wavelength."""
    spec = _spectrum(estimate)
    if spec is None:
        return None
    entries = spec["entries"]
    lam = np.array([e["wavelength_m"]["value"] for e in entries]) * 1e9
    with rc_context(RC):
        fig = new_figure(9, 10)
        top, middle, bottom = fig.subplots(3, 1, sharex=True)
        for ax, key, colour, label in (
            (top, "sigma_e_m2", BLUE, "emission σe"),
            (middle, "sigma_a_m2", VERMILLION, "absorption σa"),
        ):
            v = np.array([e[key]["value"] for e in entries]) / UNIT
            s = np.array([e[key]["sigma"] for e in entries]) / UNIT
            ax.fill_between(lam, v - 2 * s, v + 2 * s, color=colour, alpha=0.2, lw=0)
            ax.plot(
                lam, v, "o-", color=colour, ms=4, lw=1.2, label=f"{label} (band: ±2σ, noise and systematic)"
            )
            ax.set_ylabel(f"{label.split()[-1]} (10⁻²⁰ cm²)")
        anchors = [e for e in entries if e.get("anchor")]
        for ax in (top, middle):
            if anchors:
                ax.axvline(anchors[0]["wavelength_m"]["value"] * 1e9, color=GREY, ls=":", lw=1.0)
                ax.plot([], [], ":", color=GREY, label="bench wavelength (the bench file's values)")
            ax.legend(loc="upper left", frameon=False, fontsize="small")
        fam = spec.get("family") or {}
        lam_f = np.array(fam.get("wavelength_m") or []) * 1e9
        cmap = colormaps["viridis"]
        betas = fam.get("beta") or []
        for k, (b, row) in enumerate(zip(betas, fam.get("sigma_g_m2") or [])):
            bottom.plot(
                lam_f,
                np.array(row) / UNIT,
                color=cmap(k / max(len(betas) - 1, 1)),
                lw=1.2,
                label=f"β = {b:g}",
            )
        g = np.array([e["sigma_g_m2"]["value"] for e in entries]) / UNIT
        gs = np.array([e["sigma_g_m2"]["sigma"] for e in entries]) / UNIT
        beta = float(np.median([e["beta"]["value"] for e in entries]))
        bottom.errorbar(
            lam,
            g,
            yerr=2 * gs,
            fmt="s",
            ms=4,
            color=BLACK,
            capsize=2,
            lw=1.0,
            label=f"measured β ≈ {beta:.3f} (±2σ)",
        )
        bottom.axhline(0.0, color=BLACK, lw=0.6)
        bottom.set_xlabel("probe wavelength λ (nm)")
        bottom.set_ylabel("gain cross-section σg (10⁻²⁰ cm²)")
        bottom.legend(loc="upper left", frameon=False, fontsize="x-small", ncols=2)
        mc = spec.get("mccumber") or {}
        note = ""
        if mc.get("z"):
            note = f"\nMcCumber check: max |z| = {mc['max_abs_z']:.2g}"
            if mc.get("far_from_zero_line_m"):
                note += f"; {len(mc['far_from_zero_line_m'])} wavelengths beyond 3 kT of the zero line (errors amplified)"
        fig.suptitle(f"Cross-section spectra, run {plain(title)}{note}", fontsize="medium")
    return fig
