"""The report page: one HTML file, plain CSS, no JavaScript, no external resources.

`render` turns a `bench.report.data.ReportData` and its figures into the page's text. Every piece of
text that comes from the run file (labels, names, notes, reasons, overrides, meta) is untrusted
and passes through `esc` (``html.escape``) before it reaches the page; numbers are formatted
here. Figures are embedded as base64 PNG ``data:`` URIs, so the page needs no other file.
"""

from __future__ import annotations

import base64
import math
from collections.abc import Mapping, Sequence
from typing import Any

from bench.report.data import AnalysisData, FigureFile, ReportData
from bench.report.html_bench import meta_section, safety_section, settings_section
from bench.report.html_format import (
    esc,
    kv_table,
    num,
    pm_text,
    quantity_cells,
    scaled,
    seconds_text,
    table,
    times_ten,
)

#: Estimate names shown, in order: (key, label, scale to the display unit, display unit).
QUANTITIES = (
    ("ln_ratio", "ln R (pumped / unpumped transmission)", 1.0, ""),
    ("gain_linear", "single-pass net gain G", 1.0, ""),
    ("gain_db", "single-pass net gain", 1.0, "dB"),
    ("gain_coefficient_per_cm", "gain coefficient g", 1.0, "cm⁻¹"),
    ("n2_per_m3", "excited density ⟨N₂⟩", 1.0, "m⁻³"),
    ("beta", "excited fraction β", 1.0, ""),
    ("tau_s", "upper-state lifetime τ", 1e3, "ms"),
    ("beta_max", "saturated excited fraction β_max", 1.0, ""),
    ("p_sat_w", "saturation pump power P_sat", 1.0, "W"),
    ("line_centre_m", "gain line centre", 1e9, "nm"),
    ("gaussian_fwhm_hz", "Gaussian line width (FWHM)", 1e-12, "THz"),
    ("lorentzian_fwhm_hz", "Lorentzian line width (FWHM)", 1e-12, "THz"),
)

FLAG_MEANINGS = {
    "probe_not_weak": "the probe is not weak: its intensity (or fluence) is above the configured fraction of "
    "saturation (pulsed probes are corrected with the Frantz-Nodvik relation)",
    "near_full_scale": "a sample behind the estimate was near the detector's full scale",
    "baseline_stale": "the baseline is older than allowed, or the pump-off level drifted away from it",
    "low_snr": "the signal is small against its noise, or too few batches, cycles or decays lie behind it",
    "not_settled": "pump-on samples within the settle time, or no settled data at all",
    "no_baseline": "a figure needs the stored baseline and there is none",
    "no_dark": "no dark was captured: zero volts assumed",
    "overload": "the lock-in reported an overload (an output beyond its full scale) during the estimate's readings",
    "phase_mismatch": "the lock-in's phase differs from the medium's response model (lifetime, pump rate) "
    "or from an instrument phase offset; ln R uses the magnitude only",
    "thick_sample": "the sample absorbs much of the pump: the lock-in's response correction takes the pump rate "
    "as uniform along it",
    "background_high": "the pump-induced background (fluorescence, scattered pump) subtracted from the probe is "
    "above 1 % of the probe level: the result leans on that subtraction",
    "temperature_drift": "the sample's temperature moved by more than 1 K within the estimate: the correction to "
    "the baseline's temperature uses its mean",
    "heating_ripple": "a modulated pump heated the sample by more than 1 K: the correction takes the pump-on and "
    "pump-off half-periods as equally warm, but a sample whose thermal time is not far longer than the period is "
    "warmer in the pump-on half, which reads as less inversion (not corrected, not in sigma)",
    "temperature_unknown": "the bench file gives the cross-sections' temperature dependence but no reading of the "
    "sample's temperature (at the baseline or during the estimate) was there to correct with",
}

CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
       margin: 0 auto; max-width: 1120px; padding: 0 1.2em 3em; color: #1b1b1b; line-height: 1.45; }
h1 { font-size: 1.6em; margin: 1em 0 0.2em; }
h2 { font-size: 1.3em; margin-top: 2em; border-bottom: 2px solid #444; padding-bottom: 0.15em; }
h3 { font-size: 1.08em; margin-top: 1.4em; }
table { border-collapse: collapse; margin: 0.6em 0 1em; font-size: 0.93em; }
th, td { border: 1px solid #b8b8b8; padding: 0.25em 0.55em; text-align: left; vertical-align: top; }
th { background: #eeeeee; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.kv th { width: 17em; font-weight: normal; background: #f5f5f5; }
.banner { border: 4px double #000; padding: 0.6em 1em; margin: 1em 0; font-weight: bold; font-size: 1.1em; }
.banner.sim { background: #fff4d6; }
.banner.warn { background: #fde3d9; }
.notice { border-left: 6px solid #0072B2; background: #eef5fb; padding: 0.5em 0.9em; margin: 0.8em 0; }
.refused, .bad { font-weight: bold; text-decoration: underline; }
.ok { font-weight: normal; }
figure { margin: 1.2em 0 2em; }
figure img { max-width: 100%; height: auto; border: 1px solid #ccc; }
figcaption { font-size: 0.92em; color: #333; margin-top: 0.3em; }
nav ol { columns: 2; }
code { background: #f2f2f2; padding: 0 0.2em; }
.muted { color: #555; }
"""


# --------------------------------------------------------------------------------------------
# Sections


def _header(d: ReportData) -> str:
    parts = [
        f"<h1>Run report: {esc(d.run_id)}</h1>",
        f'<p class="muted">gainbench {esc(d.software_version)} · report written {esc(d.generated_at)} · '
        f"run file <code>{esc(d.run_path)}</code></p>",
    ]
    if d.simulated:
        parts.append(
            '<div class="banner sim">SIMULATED BENCH: every reading in this run comes from the '
            "gainbench simulator, not from a real sample or real instruments. The sample and its "
            "numbers are invented for the demo.</div>"
        )
    if d.status != "complete":
        parts.append(
            '<div class="banner warn">INCOMPLETE RUN: the run has no stop time (it is still being '
            "recorded, or it was cut off); the report shows what was stored.</div>"
        )
    if d.trips:
        unack = sum(1 for t in d.trips if t.get("acknowledged_at") is None)
        text = f"THE GUARD TRIPPED {len(d.trips)} time{'s' if len(d.trips) != 1 else ''} in this run"
        if unack:
            text += f"; {unack} trip{'s were' if unack != 1 else ' was'} NOT acknowledged"
        parts.append(f'<div class="banner warn">{esc(text)} (see <a href="#safety">Safety</a>).</div>')
    return "\n".join(parts)


def _glance(d: ReportData) -> str:
    m = d.meta
    first = d.analyses[0] if d.analyses else None
    rows = [
        ("Mode", esc(m.get("mode"))),
        ("Sample", f"{esc(d.cfg.sample.label)} (id {esc(d.cfg.sample.sample_id)})"),
        ("Operator", esc(m.get("operator") or "(none recorded)")),
        ("Start / stop", f"{esc(m.get('start_time'))} / {esc(m.get('stop_time') or '(no stop time)')}"),
        ("Duration", num(d.duration_s, ".2f", "s")),
        (
            "Bench",
            esc(m.get("bench_name") or d.cfg.name) + (" <strong>[SIMULATED]</strong>" if d.simulated else ""),
        ),
    ]
    if first is not None and first.final is not None and first.final.values:
        for key, label in (("beta", "Excited fraction β"), ("gain_db", "Single-pass net gain")):
            q = first.final.values.get(key)
            if q is not None:
                unit = " dB" if key == "gain_db" else ""
                rows.append((f"{label}, {first.label}", f"{pm_text(q.value, q.sigma)}{unit} (±1σ combined)"))
    elif first is not None:
        rows.append(("Estimates", "none: the pump never ran long enough, or no baseline was taken"))
    passed = [e for e in d.events if e.kind == "checklist" and "passed" in (e.data or {})]
    if passed:
        last = passed[-1]
        verdict = "passed" if last.data.get("passed") else '<span class="refused">REFUSED</span>'
        rows.append(
            ("Arming checklist", f"{verdict} at t = {seconds_text(last.t)}, answered by {esc(last.who)}")
        )
    else:
        rows.append(("Arming checklist", "not run in this run"))
    rows.append(("Guard trips", str(len(d.trips)) if d.trips else "none"))
    if len(d.all_analyses) > 1:
        rows.append(
            (
                "Analyses in the run",
                ", ".join(f"{esc(a['id'])} ({esc(a.get('kind'))})" for a in d.all_analyses)
                + f"; shown: {', '.join(str(a.id) for a in d.analyses)}",
            )
        )
    return '<h2 id="glance">At a glance</h2>\n' + kv_table(rows)


def _truth_of(a: AnalysisData) -> Mapping[str, Any]:
    t = a.summary.get("truth") if isinstance(a.summary, Mapping) else None
    return t if isinstance(t, Mapping) else {}


def _keys(analyses: Sequence[AnalysisData]) -> list[tuple[str, str, float, str]]:
    present: dict[str, None] = {}
    for a in analyses:
        if a.final is not None:
            present.update(dict.fromkeys(a.final.values))
    known = [q for q in QUANTITIES if q[0] in present]
    other = [(k, k, 1.0, "") for k in present if k not in {q[0] for q in QUANTITIES}]
    return known + other


def _estimate_table(a: AnalysisData, simulated: bool) -> str:
    if a.final is None:
        return (
            "<p>No estimate in this analysis (the pump never ran long enough, or no baseline was taken).</p>"
        )
    flags = sorted(a.final.flags)
    flag_html = (
        "<p>Flags: none.</p>"
        if not flags
        else "<p>Flags:</p><ul>"
        + "".join(f"<li><code>{esc(f)}</code>: {esc(FLAG_MEANINGS.get(f, ''))}</li>" for f in flags)
        + "</ul>"
    )
    if not a.final.values:
        return (
            f"<p>The last estimate (t = {seconds_text(a.final.t)}, mode {esc(a.final.mode)}) has no values: "
            "no settled data, or no baseline.</p>" + flag_html
        )
    truth = _truth_of(a)
    head = ["quantity", "unit", "value", "σ combined", "σ noise", "σ systematic"]
    if simulated:
        head += ["simulator truth", "(value − truth) / σ"]
    rows = []
    for key, label, scale, unit in _keys([a]):
        q = a.final.values[key]
        v, s, n, y, exp, dec = quantity_cells(
            q.value * scale, q.sigma * scale, q.sigma_noise * scale, q.sigma_systematic * scale
        )
        row = [esc(label), esc(unit), (v, "num"), (s, "num"), (n, "num"), (y, "num")]
        if simulated:
            tv = truth.get(key, {}).get("value") if isinstance(truth.get(key), Mapping) else None
            if isinstance(tv, (int, float)):
                z = (q.value - tv) / q.sigma if q.sigma > 0 else math.nan
                row += [(scaled(tv * scale, exp, dec) + times_ten(exp), "num"), (num(z, "+.2f"), "num")]
            else:
                row += [("–", "num"), ("–", "num")]
        rows.append(row)
    info = (
        f'<p class="muted">Final cumulative estimate at t = {seconds_text(a.final.t)} (mode {esc(a.final.mode)}, '
        f"{a.final.n_samples:,} samples). σ combined is the noise part and the systematic part (configured "
        "uncertainties of length, density and cross-sections) added in quadrature; it is one standard "
        "uncertainty.</p>"
    )
    return info + table(head, rows) + flag_html


def _side_by_side(d: ReportData) -> str:
    keys = _keys(d.analyses)
    head = ["quantity", "unit"] + [esc(a.label) for a in d.analyses]
    truth = _truth_of(d.analyses[0])
    if d.simulated:
        head.append("simulator truth")
    rows = []
    for key, label, scale, unit in keys:
        row = [esc(label), esc(unit)]
        for a in d.analyses:
            q = a.final.values.get(key) if a.final is not None else None
            row.append((pm_text(q.value, q.sigma, scale) if q is not None else "–", "num"))
        if d.simulated:
            tv = truth.get(key, {}).get("value") if isinstance(truth.get(key), Mapping) else None
            row.append((num(tv * scale, ".5g") if isinstance(tv, (int, float)) else "–", "num"))
        rows.append(row)
    over = [
        esc(a.label)
        + ": "
        + (
            ", ".join(f"<code>{esc(k)}</code> = {esc(v)}" for k, _, v in a.overridden)
            or "bench file as recorded"
        )
        for a in d.analyses
    ]
    return (
        "<h3>Side by side (value ± σ combined)</h3>"
        + table(head, rows)
        + "<p>Parameters:</p><ul>"
        + "".join(f"<li>{o}</li>" for o in over)
        + "</ul>"
    )


def _estimates(d: ReportData) -> str:
    out = ['<h2 id="estimates">Estimates</h2>']
    if not d.analyses:
        return out[0] + "<p>The run holds no analysis.</p>"
    if len(d.analyses) > 1:
        out.append(_side_by_side(d))
    for a in d.analyses:
        out.append(f"<h3>{esc(a.label)}</h3>")
        if a.overridden:
            out.append("<p>This re-analysis changed these bench-file parameters:</p>")
            out.append(
                table(
                    ["parameter", "as recorded", "override used"],
                    [[f"<code>{esc(k)}</code>", esc(old), esc(new)] for k, old, new in a.overridden],
                )
            )
        out.append(_estimate_table(a, d.simulated))
    return "\n".join(out)


def _analyses(d: ReportData) -> str:
    shown = {a.id for a in d.analyses}
    rows = []
    for a in d.all_analyses:
        ov = a.get("overrides") if isinstance(a.get("overrides"), Mapping) else {}
        rows.append(
            [
                esc(a.get("id")) + (" (shown)" if a.get("id") in shown else ""),
                esc(a.get("kind")),
                esc(a.get("created")),
                esc(a.get("finished") or "(not finished)"),
                ", ".join(f"<code>{esc(k)}</code> = {esc(v)}" for k, v in ov.items()) or "none",
                esc(a.get("software_version")),
                esc(a.get("note")),
                (num(a.get("estimates"), "d"), "num"),
            ]
        )
    return (
        '<h2 id="analyses">Analyses of this run</h2>'
        "<p>The live analysis was computed while recording; a re-analysis replays the stored raw data "
        "with changed parameters and is stored beside it, never over it.</p>"
        + table(["id", "kind", "created", "finished", "overrides", "software", "note", "estimates"], rows)
    )


def _figures(figures: Sequence[FigureFile], errors: Sequence[tuple[str, str]] = ()) -> str:
    out = [
        '<h2 id="figures">Figures</h2>',
        '<p class="muted">Figures are embedded in this page; the same PNG files are in the report\'s '
        "directory.</p>",
    ]
    if not figures:
        out.append("<p>No figure could be drawn.</p>")
    for title, why in errors:
        out.append(
            f'<p class="bad">Figure "{esc(title)}" could not be drawn from the run\'s data: {esc(why)}</p>'
        )
    for k, f in enumerate(figures, start=1):
        data = base64.b64encode(f.path.read_bytes()).decode("ascii")
        out.append(
            f'<figure id="fig-{esc(f.key)}"><img src="data:image/png;base64,{data}" '
            f'alt="{esc(f.title)}"><figcaption><strong>Figure {k}. {esc(f.title)}.</strong> '
            f'{esc(f.caption)} <span class="muted">(file {esc(f.path.name)})</span></figcaption></figure>'
        )
    return "\n".join(out)


def _events(d: ReportData, limit: int = 2000) -> str:
    counts: dict[str, int] = {}
    for e in d.events:
        counts[e.kind] = counts.get(e.kind, 0) + 1
    rows = [[seconds_text(e.t), esc(e.kind), esc(e.who), esc(e.text)] for e in d.events[:limit]]
    more = (
        f"<p>… and {len(d.events) - limit} more events (export them with <code>gainbench export "
        f"--what events</code>).</p>"
        if len(d.events) > limit
        else ""
    )
    summary = ", ".join(f"{esc(k)} {v}" for k, v in sorted(counts.items())) or "none"
    return (
        f'<h2 id="events">Events</h2><p>{len(d.events)} events: {summary}.</p>'
        + table(["t", "kind", "by", "text"], rows)
        + more
    )


def _nav() -> str:
    items = [
        ("glance", "At a glance"),
        ("estimates", "Estimates"),
        ("analyses", "Analyses"),
        ("figures", "Figures"),
        ("safety", "Safety: checklist, eyewear, trips"),
        ("settings", "Sample and bench settings"),
        ("meta", "Run"),
        ("events", "Events"),
    ]
    return "<nav><ol>" + "".join(f'<li><a href="#{k}">{esc(v)}</a></li>' for k, v in items) + "</ol></nav>"


def render(d: ReportData, figures: Sequence[FigureFile]) -> str:
    """The report page's text."""
    body = "\n".join(
        [
            _header(d),
            _nav(),
            _glance(d),
            _estimates(d),
            _analyses(d),
            _figures(figures, d.extra.get("figure_errors", ())),
            safety_section(d),
            settings_section(d),
            meta_section(d),
            _events(d),
        ]
    )
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f"<title>gainbench report {esc(d.run_id)}</title>\n"
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<style>{CSS}</style>\n</head>\n<body>\n{body}\n"
        f'<footer><p class="muted">Written by gainbench {esc(d.software_version)} from the run file alone; '
        "reading it never changes the run.</p></footer>\n</body>\n</html>\n"
    )
