"""The report page: one HTML file, plain CSS, no JavaScript, no external resources.

`render` turns a `bench.report.data.ReportData` and its figures into the page's text. Every piece of
text that comes from the run file (labels, names, notes, reasons, overrides, meta) is untrusted
and passes through `esc` (``html.escape``) before it reaches the page; numbers are formatted
here. Figures are embedded as base64 PNG ``data:`` URIs, so the page needs no other file.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Mapping, Sequence
from typing import Any

from bench.report.data import AnalysisData, FigureFile, ReportData
from bench.safety.checklist import SECOND_LAYER_NOTICE
from bench.safety.exposure_limits import caution_text

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


def esc(value: Any) -> str:
    """Text for the page: ``html.escape`` of ``str(value)`` (quotes too)."""
    return html.escape("" if value is None else str(value), quote=True)


# --------------------------------------------------------------------------------------------
# Numbers


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _exponent(value: float, sigma: float) -> int:
    ref = abs(value) if value else abs(sigma)
    if not (math.isfinite(ref) and ref > 0):
        return 0
    e = int(math.floor(math.log10(ref)))
    return e if (e >= 5 or e <= -4) else 0


def _decimals(sigma: float) -> int | None:
    if not (math.isfinite(sigma) and sigma > 0):
        return None
    return min(12, max(0, 1 - int(math.floor(math.log10(sigma)))))


def _scaled(x: float, exp: int, decimals: int | None) -> str:
    if x is None or not isinstance(x, (int, float)):
        return "–"
    if not math.isfinite(x):
        return "n/a"
    y = x / 10.0**exp
    text = f"{y:.{decimals}f}" if decimals is not None else f"{y:.6g}"
    return text.replace("-", "−")


def _times_ten(exp: int) -> str:
    return f" × 10{str(exp).translate(_SUPERSCRIPT)}" if exp else ""


def sci(x: Any, digits: int = 2) -> str:
    """``x`` to ``digits`` significant digits, as ``m × 10ⁿ`` when it is very large or small."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return "–"
    if not math.isfinite(x):
        return "n/a"
    if x == 0:
        return "0"
    e = int(math.floor(math.log10(abs(x))))
    if e >= 5 or e <= -4:
        m = float(f"{x / 10.0**e:.{digits - 1}e}".split("e")[0])
        if abs(m) >= 10:  # rounding carried over
            m, e = m / 10, e + 1
        return f"{m:.{digits - 1}f}".replace("-", "−") + _times_ten(e)
    if e >= digits - 1:
        return f"{round(x, digits - 1 - e):.0f}".replace("-", "−")
    return f"{x:.{digits - 1 - e}f}".replace("-", "−")


def quantity_cells(
    value: float, sigma: float, noise: float, systematic: float
) -> tuple[str, str, str, str, int, int | None]:
    """Value (to the digit of sigma's second significant figure, on the value's power of ten),
    and sigma, noise and systematic parts to two significant digits."""
    exp = _exponent(value, sigma)
    dec = _decimals(sigma / 10.0**exp) if isinstance(sigma, (int, float)) else None
    return (_scaled(value, exp, dec) + _times_ten(exp), sci(sigma), sci(noise), sci(systematic), exp, dec)


def pm_text(value: float, sigma: float, scale: float = 1.0) -> str:
    """``value ± sigma`` (two significant digits of sigma), scaled."""
    v, s = value * scale, sigma * scale
    exp = _exponent(v, s)
    dec = _decimals(s / 10.0**exp)
    core = f"{_scaled(v, exp, dec)} ± {_scaled(s, exp, dec)}"
    return f"({core}){_times_ten(exp)}" if exp else core


def _num(x: Any, fmt: str = ".6g", unit: str = "") -> str:
    """A number for the page (exponents as ``× 10ⁿ``); other values escaped, or a dash."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return esc(x) if x not in (None, "") else "–"
    if not math.isfinite(x):
        return "n/a"
    text = f"{x:{fmt}}"
    if "e" in text and "," not in fmt:
        mant, _, ex = text.partition("e")
        text = mant + _times_ten(int(ex))
    if text in ("-0.00", "+0.00", "-0.0", "+0.0"):
        text = text[1:]
    return text.replace("-", "−") + (f" {unit}" if unit else "")


# --------------------------------------------------------------------------------------------
# Building blocks


def _table(head: Sequence[str], rows: Sequence[Sequence[str]], cls: str = "") -> str:
    """A table; ``head`` and cells are already HTML (escape run text before passing it)."""
    out = [f'<table class="{cls}">' if cls else "<table>"]
    if head:
        out.append("<thead><tr>" + "".join(f"<th>{h}</th>" for h in head) + "</tr></thead>")
    out.append("<tbody>")
    for row in rows:
        cells = []
        for c in row:
            if isinstance(c, tuple):  # (html, css class)
                cells.append(f'<td class="{c[1]}">{c[0]}</td>')
            else:
                cells.append(f"<td>{c}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out)


def _kv(rows: Sequence[tuple[str, str]]) -> str:
    """A two-column key/value table; values are HTML."""
    body = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return f'<table class="kv"><tbody>{body}</tbody></table>'


def _seconds(t: Any) -> str:
    return _num(t, ".3f", "s")


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
        ("Duration", _num(d.duration_s, ".2f", "s")),
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
        rows.append(("Arming checklist", f"{verdict} at t = {_seconds(last.t)}, answered by {esc(last.who)}"))
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
    return '<h2 id="glance">At a glance</h2>\n' + _kv(rows)


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
            f"<p>The last estimate (t = {_seconds(a.final.t)}, mode {esc(a.final.mode)}) has no values: "
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
                row += [(_scaled(tv * scale, exp, dec) + _times_ten(exp), "num"), (_num(z, "+.2f"), "num")]
            else:
                row += [("–", "num"), ("–", "num")]
        rows.append(row)
    info = (
        f'<p class="muted">Final cumulative estimate at t = {_seconds(a.final.t)} (mode {esc(a.final.mode)}, '
        f"{a.final.n_samples:,} samples). σ combined is the noise part and the systematic part (configured "
        "uncertainties of length, density and cross-sections) added in quadrature; it is one standard "
        "uncertainty.</p>"
    )
    return info + _table(head, rows) + flag_html


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
            row.append((_num(tv * scale, ".5g") if isinstance(tv, (int, float)) else "–", "num"))
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
        + _table(head, rows)
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
                _table(
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
                (_num(a.get("estimates"), "d"), "num"),
            ]
        )
    return (
        '<h2 id="analyses">Analyses of this run</h2>'
        "<p>The live analysis was computed while recording; a re-analysis replays the stored raw data "
        "with changed parameters and is stored beside it, never over it.</p>"
        + _table(["id", "kind", "created", "finished", "overrides", "software", "note", "estimates"], rows)
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


def _answer_text(data: Mapping[str, Any]) -> str:
    a = data.get("answer")
    kind = data.get("kind")
    if kind == "eyewear":
        return f"OD {_num(a, 'g')}" if isinstance(a, (int, float)) else esc(a)
    if isinstance(a, bool):
        return "yes" if a else "no"
    if isinstance(a, Mapping):
        return ", ".join(f"{esc(k)} {esc(v)}" for k, v in a.items())
    if data.get("item") == "mount_temperature" and isinstance(a, (int, float)):
        return f"{a:.2f} K ({a - 273.15:.1f} °C)"
    return esc(a)


def _safety(d: ReportData) -> str:
    out = ['<h2 id="safety">Safety</h2>', f'<div class="notice">{esc(SECOND_LAYER_NOTICE)}</div>']
    checks = [e for e in d.events if e.kind == "checklist"]
    if not checks:
        out.append("<p>No arming checklist was run in this run.</p>")
    attempt: list = []
    attempts: list[list] = []
    for e in checks:
        attempt.append(e)
        if "passed" in (e.data or {}):
            attempts.append(attempt)
            attempt = []
    if attempt:
        attempts.append(attempt)
    eyewear_rows = []
    for k, items in enumerate(attempts, start=1):
        verdict_ev = items[-1] if "passed" in (items[-1].data or {}) else None
        if verdict_ev is None:
            verdict = '<span class="refused">no verdict recorded</span>'
        elif verdict_ev.data.get("passed"):
            verdict = f"passed at t = {_seconds(verdict_ev.t)}, operator {esc(verdict_ev.who)}"
        else:
            reasons = "; ".join(str(r) for r in verdict_ev.data.get("refusals") or [])
            verdict = f'<span class="refused">REFUSED</span> at t = {_seconds(verdict_ev.t)}: {esc(reasons)}'
        out.append(f"<h3>Arming checklist{f' {k}' if len(attempts) > 1 else ''}: {verdict}</h3>")
        rows = []
        for e in items:
            data = e.data or {}
            if "item" not in data:
                continue
            ok = data.get("ok")
            result = "ok" if ok else '<span class="refused">REFUSED</span>'
            req = data.get("required_od")
            rows.append(
                [
                    _seconds(e.t),
                    esc(e.who),
                    f"<code>{esc(data.get('item'))}</code>",
                    esc(data.get("prompt")),
                    _answer_text(data),
                    f"OD {_num(req, 'g')}" if req is not None else "–",
                    result,
                    esc(data.get("via")),
                ]
            )
            if data.get("kind") == "eyewear":
                lam = data.get("wavelength_m")
                ans = data.get("answer")
                eyewear_rows.append(
                    [
                        _num(lam * 1e9, ".1f", "nm") if isinstance(lam, (int, float)) else "–",
                        _num(ans, "g"),
                        _num(req, "g"),
                        result,
                        esc(e.who),
                        _seconds(e.t),
                    ]
                )
        out.append(
            _table(
                ["t", "operator", "item", "question / check", "answer", "required", "result", "given via"],
                rows,
            )
        )
    if eyewear_rows:
        out.append("<h3>Laser-safety eyewear: optical density confirmed vs required</h3>")
        out.append(
            _table(["wavelength", "OD confirmed", "OD required", "result", "operator", "t"], eyewear_rows)
        )
        out.append(f'<p class="muted">{esc(caution_text())}</p>')
    out.append("<h3>Guard trips</h3>")
    if not d.trips:
        out.append("<p>The guard did not trip in this run.</p>")
    else:
        speed = d.meta.get("speed") or 1.0
        rows = []
        for t in d.trips:
            lat = t.get("latency_s")
            lat_text = "unknown" if not isinstance(lat, (int, float)) else f"{lat * 1e3:.1f} ms"
            if isinstance(lat, (int, float)) and isinstance(speed, (int, float)) and speed != 1.0:
                lat_text += f" of run clock ({lat / speed * 1e3:.2f} ms real, speed ×{speed:g})"
            ack = (
                f"by {esc(t.get('acknowledged_by'))} at t = {_seconds(t.get('acknowledged_at'))}"
                if t.get("acknowledged_at") is not None
                else '<span class="refused">NOT acknowledged</span>'
            )
            rows.append(
                [
                    _seconds(t.get("t")),
                    esc(t.get("reason")),
                    f"<code>{esc(t.get('condition'))}</code>",
                    _seconds(t.get("seen_at")),
                    (lat_text, "num"),
                    ack,
                ]
            )
        out.append(
            _table(
                ["t (pump off)", "reason", "condition", "condition seen at", "latency", "acknowledged"], rows
            )
        )
        out.append(
            '<p class="muted">Latency: from the reading that showed the failing condition to the pump-off '
            "command, on the run clock.</p>"
        )
    guard_rows = []
    for e in d.events:
        if e.kind not in ("guard", "trip"):
            continue
        data = e.data or {}
        accepted = data.get("accepted", True)
        guard_rows.append(
            [
                _seconds(e.t),
                esc(data.get("event")),
                esc(data.get("from")),
                esc(data.get("to")),
                "yes" if accepted else '<span class="refused">refused</span>',
                esc(e.who),
                esc(data.get("reason") or e.text),
            ]
        )
    if guard_rows:
        out.append("<h3>Guard transitions and requests</h3>")
        out.append(_table(["t", "request", "from", "to", "accepted", "by", "reason"], guard_rows))
    return "\n".join(out)


def _settings(d: ReportData) -> str:
    c = d.cfg
    s, pr, pu, g = c.sample, c.probe, c.pump, c.guard
    u = s.uncertainty
    sample = [
        ("Label", esc(s.label)),
        ("Sample id", esc(s.sample_id)),
        ("Length L", f"{_num(s.length * 1e3, '.4g', 'mm')} (±{_num(u.length * 1e3, '.2g', 'mm')})"),
        (
            "Dopant density N",
            f"{_num(s.n_total * 1e-6, '.4g', 'cm⁻³')} = {_num(s.n_total, '.4g', 'm⁻³')} "
            f"(±{_num(u.n_total * 100, '.2g')} %)",
        ),
        ("Emission cross-section at the probe σe", _num(s.sigma.probe_emission * 1e4, ".4g", "cm²")),
        ("Absorption cross-section at the probe σa", _num(s.sigma.probe_absorption * 1e4, ".4g", "cm²")),
        ("Absorption cross-section at the pump", _num(s.sigma.pump_absorption * 1e4, ".4g", "cm²")),
        ("Emission cross-section at the pump", _num(s.sigma.pump_emission * 1e4, ".4g", "cm²")),
        ("Cross-section uncertainty", f"±{_num(u.cross_sections * 100, '.2g')} % each"),
        (
            "Upper-state lifetime (configured)",
            f"{_num(s.upper_state_lifetime * 1e3, '.4g', 'ms')} "
            f"(±{_num(u.upper_state_lifetime * 100, '.2g')} %)",
        ),
        ("Temperature", _num(s.temperature, ".5g", "K")),
        ("Refractive index", _num(s.refractive_index, ".4g")),
        ("Cross-section spectrum file", esc(s.spectrum_file) if s.spectrum_file else "none"),
    ]
    lasers = [
        ("Probe wavelength", _num(pr.wavelength * 1e9, ".5g", "nm")),
        ("Probe power", _num(pr.power * 1e3, ".4g", "mW")),
        ("Probe beam diameter (1/e²)", _num(pr.beam_diameter * 1e3, ".4g", "mm")),
        ("Probe kind", esc(pr.kind)),
        ("Probe pulse energy", _num(pr.pulse_energy, ".4g", "J") if pr.pulse_energy else "–"),
        ("Weak-probe limit I/I_sat", _num(pr.weak_fraction, ".3g")),
        ("Pump wavelength", _num(pu.wavelength * 1e9, ".5g", "nm")),
        ("Pump current limit (tool)", _num(pu.max_current, ".4g", "A")),
        ("Pump diode current rating", _num(pu.diode_current_rating, ".4g", "A")),
        ("Pump threshold current", _num(pu.threshold_current, ".4g", "A")),
        ("Pump slope efficiency", _num(pu.slope_efficiency, ".4g", "W/A")),
        ("Pump power at the limit", _num(pu.max_power, ".4g", "W")),
        ("Pump beam diameter (1/e²)", _num(pu.beam_diameter * 1e3, ".4g", "mm")),
    ]
    guard = [
        ("Maximum current", _num(g.max_current, ".4g", "A")),
        ("Current tolerance", _num(g.current_tolerance, ".3g", "A")),
        (
            "Mount temperature window",
            f"{_num(g.mount_temperature_min, '.5g', 'K')} to "
            f"{_num(g.mount_temperature_max, '.5g', 'K')} "
            f"({_num(g.mount_temperature_min - 273.15, '.3g')} to "
            f"{_num(g.mount_temperature_max - 273.15, '.3g', '°C')})",
        ),
        ("Detector full-scale trip", f"{_num(g.full_scale_fraction * 100, '.3g')} % of range"),
        ("Stale readings after", _num(g.stale_after, ".3g", "s")),
        ("Communication failures before a trip", _num(g.comm_failures, "d")),
        (
            "Sudden transmission change trip",
            f"{_num(g.transmission_jump * 100, '.3g')} % relative change" if g.transmission_jump else "off",
        ),
    ]
    sim = c.simulation
    simulation = (
        []
        if sim is None
        else [
            ("Random seed", _num(sim.seed, "d")),
            ("Probe signal, unpumped", _num(sim.probe_signal, ".4g", "V")),
            ("Reference signal", _num(sim.reference_signal, ".4g", "V")),
            ("Detector noise", _num(sim.detector_noise * 1e3, ".3g", "mV rms per sample")),
            ("Relative intensity noise", _num(sim.relative_intensity_noise, ".3g")),
            (
                "Dark levels (probe, reference)",
                f"{_num(sim.dark_probe * 1e3, '.3g')}, {_num(sim.dark_reference * 1e3, '.3g', 'mV')}",
            ),
            ("Source drift", f"{_num(sim.drift_per_hour * 100, '.3g')} % per hour"),
            ("Digitiser resolution", _num(sim.adc_bits, "d", "bits")),
        ]
    )
    idents = d.meta.get("instruments") if isinstance(d.meta.get("instruments"), Mapping) else {}
    inst_rows = []
    for role, inst in c.instruments.items():
        inst_rows.append(
            [
                esc(role),
                esc(inst.driver),
                f"<code>{esc(inst.resource)}</code>",
                esc(inst.profile),
                esc(idents.get(role, "(not recorded)")),
            ]
        )
    for role in idents:
        if role not in c.instruments:
            inst_rows.append([esc(role), "–", "–", "–", esc(idents[role])])
    return (
        '<h2 id="settings">Sample and bench settings</h2>'
        "<p>From the bench file as it was recorded with the run"
        + (
            " (the re-analyses' overrides are listed with their estimates)"
            if any(a.overridden for a in d.analyses)
            else ""
        )
        + ".</p>"
        + "<h3>Sample</h3>"
        + _kv(sample)
        + "<h3>Probe and pump lasers</h3>"
        + _kv(lasers)
        + "<h3>Instruments</h3>"
        + _table(["role", "driver", "resource", "profile", "identity (as recorded)"], inst_rows)
        + "<h3>Guard limits</h3>"
        + _kv(guard)
        + ("<h3>Simulator settings (SIMULATED bench)</h3>" + _kv(simulation) if simulation else "")
    )


def _meta(d: ReportData) -> str:
    m = d.meta
    faults = m.get("faults")
    rows = [
        ("Run id", esc(d.run_id)),
        ("Run file", f"<code>{esc(d.run_path)}</code>"),
        ("Status", esc(d.status)),
        ("Start time", esc(m.get("start_time"))),
        ("Stop time", esc(m.get("stop_time") or "(none)")),
        ("Stop reason", esc(m.get("stop_reason") or "–")),
        ("Duration", _num(d.duration_s, ".3f", "s")),
        ("Operator", esc(m.get("operator") or "(none recorded)")),
        ("Mode", esc(m.get("mode"))),
        ("Simulated", "<strong>YES: SIMULATED BENCH</strong>" if d.simulated else "no (real instruments)"),
        ("Recorded with gainbench", esc(m.get("software_version"))),
        ("Bench", esc(m.get("bench_name"))),
        ("Bench file", esc(m.get("bench_source"))),
        ("Platform", esc(m.get("platform"))),
        ("Run file schema", esc(m.get("schema_version"))),
        ("Blocks stored", _num(d.block_count, ",d")),
        ("Detector samples (figure 1)", _num(d.extra.get("signal_samples"), ",d")),
    ]
    if m.get("speed") not in (None, 1, 1.0):
        rows.append(("Simulation speed", f"×{esc(m.get('speed'))} (run clock vs real time)"))
    if faults:
        rows.append(
            (
                "Faults injected (simulator)",
                esc(", ".join(map(str, faults)) if isinstance(faults, list) else faults),
            )
        )
    return '<h2 id="meta">Run</h2>' + _kv(rows)


def _events(d: ReportData, limit: int = 2000) -> str:
    counts: dict[str, int] = {}
    for e in d.events:
        counts[e.kind] = counts.get(e.kind, 0) + 1
    rows = [[_seconds(e.t), esc(e.kind), esc(e.who), esc(e.text)] for e in d.events[:limit]]
    more = (
        f"<p>… and {len(d.events) - limit} more events (export them with <code>gainbench export "
        f"--what events</code>).</p>"
        if len(d.events) > limit
        else ""
    )
    summary = ", ".join(f"{esc(k)} {v}" for k, v in sorted(counts.items())) or "none"
    return (
        f'<h2 id="events">Events</h2><p>{len(d.events)} events: {summary}.</p>'
        + _table(["t", "kind", "by", "text"], rows)
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
            _safety(d),
            _settings(d),
            _meta(d),
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
