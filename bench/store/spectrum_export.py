"""A spectrum run's measured cross-sections as a cross-section spectrum file, the CSV that
``sample.spectrum`` / ``sample.cross_sections.spectrum`` reads (`bench.physics.spectra`): comment
lines, then ``wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]``, one row per wavelength, rising.

Steps at the same wavelength (the bench wavelength's anchors) give one row, the mean of their
values. A measured cross-section below zero (noise on a vanishing absorption) is written as 0,
and said so in a comment line. The standard uncertainties go in comment lines, so that the file
stays a plain spectrum file. Pure writing of a new file: the run is only read.
"""

from __future__ import annotations

from pathlib import Path

from bench.errors import RunStoreError
from bench.store import RunReader
from bench.store.spectrum_summary import spectrum_fits
from bench.store.summary import final_estimate

HEADER = "wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]"
CM2 = 1e-4  # m^2 per cm^2


def _run_config(reader: RunReader):
    """The bench file the run was recorded with, or None if it cannot be read back."""
    from bench.run.replay import run_config

    try:
        return run_config(reader)
    except Exception:  # an old or foreign run: the spectrum is still written, without a pump row
        return None


def spectrum_rows(entries: list[dict]) -> list[tuple[float, float, float, float, float]]:
    """(wavelength m, sigma_a, sigma_e, u_a, u_e) in m^2, one per distinct wavelength, rising."""
    groups: dict[float, list[dict]] = {}
    for e in entries:
        lam = round(e["wavelength_m"]["value"], 15)
        groups.setdefault(lam, []).append(e)
    rows = []
    for lam in sorted(groups):
        es = groups[lam]
        n = len(es)
        rows.append(
            (
                lam,
                sum(e["sigma_a_m2"]["value"] for e in es) / n,
                sum(e["sigma_e_m2"]["value"] for e in es) / n,
                sum(e["sigma_a_m2"]["sigma"] for e in es) / n,
                sum(e["sigma_e_m2"]["sigma"] for e in es) / n,
            )
        )
    return rows


def export_spectrum(path: str | Path, out: str | Path, overwrite: bool = False) -> Path:
    """Write the spectrum of the run at ``path`` to ``out``; returns ``out``."""
    out = Path(out)
    if out.is_dir():
        raise RunStoreError(f"{out}: is a directory; give a file name to export to")
    if out.exists() and not overwrite:
        raise RunStoreError(f"{out}: already exists; choose another name or allow overwriting")
    with RunReader(path) as reader:
        final = final_estimate(reader)
        fits = spectrum_fits(final)
        run_id = reader.run_id
        cfg = _run_config(reader)
    if not fits.get("entries"):
        why = fits.get("error") or (
            "it is not a spectrum run"
            if final is None or final.mode != "spectrum"
            else "it has no finished step"
        )
        raise RunStoreError(f"{path}: no spectrum to export ({why})")
    rows = spectrum_rows(fits["entries"])
    pump_row = None
    if cfg is not None and not any(abs(r[0] - cfg.pump.wavelength) < 1e-12 for r in rows):
        sig = cfg.sample.sigma
        pump_row = (cfg.pump.wavelength, sig.pump_absorption, sig.pump_emission, 0.0, 0.0)
        rows = sorted([*rows, pump_row])
    if len(rows) < 2:
        raise RunStoreError(
            f"{path}: the spectrum has {len(rows)} wavelength; a spectrum file needs 2 or more"
        )
    lines = [
        f"# cross-sections measured by gainbench, run {run_id} (spectrum mode)",
        "# standard uncertainties (noise and systematic), cm^2: wavelength nm, u(sigma_a), u(sigma_e)",
    ]
    for lam, _, _, ua, ue in rows:
        lines.append(f"#   {lam * 1e9:.6g}, {ua / CM2:.4g}, {ue / CM2:.4g}")
    if pump_row is not None:
        lines.append(
            f"# the {pump_row[0] * 1e9:.6g} nm row is the run's bench-file pump cross-sections (not measured: "
            "a bench file reads the pump's from its spectrum too); between it and the scan the file interpolates"
        )
    clipped = [lam for lam, sa, se, _, _ in rows if sa < 0 or se < 0]
    if clipped:
        lines.append(
            "# measured below zero and written as 0 at: "
            + ", ".join(f"{lam * 1e9:.6g} nm" for lam in clipped)
        )
    lines.append(HEADER)
    for lam, sa, se, _, _ in rows:
        lines.append(f"{lam * 1e9:.6g},{max(sa, 0.0) / CM2:.6e},{max(se, 0.0) / CM2:.6e}")
    partial = out.with_name(out.name + ".partial")
    partial.write_text("\n".join(lines) + "\n", encoding="utf-8")
    partial.replace(out)
    return out
