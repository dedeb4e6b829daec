"""The report page's sections about the bench and the run's safety record: the arming
checklist's answers, trips and acknowledgements, the settings the run was made with, and the
run's metadata. Untrusted text from the run file passes through `esc`.

The safety record is a second layer only: the hardware interlock, the laser safety officer,
ANSI Z136.1 / IEC 60825-1 and local rules come first.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from bench.report.data import ReportData
from bench.report.html_format import esc, kv_table, num, seconds_text, table
from bench.safety.checklist import SECOND_LAYER_NOTICE
from bench.safety.exposure_limits import caution_text


def answer_text(data: Mapping[str, Any]) -> str:
    a = data.get("answer")
    kind = data.get("kind")
    if kind == "eyewear":
        return f"OD {num(a, 'g')}" if isinstance(a, (int, float)) else esc(a)
    if isinstance(a, bool):
        return "yes" if a else "no"
    if isinstance(a, Mapping):
        return ", ".join(f"{esc(k)} {esc(v)}" for k, v in a.items())
    if data.get("item") == "mount_temperature" and isinstance(a, (int, float)):
        return f"{a:.2f} K ({a - 273.15:.1f} °C)"
    return esc(a)


def safety_section(d: ReportData) -> str:
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
            verdict = f"passed at t = {seconds_text(verdict_ev.t)}, operator {esc(verdict_ev.who)}"
        else:
            reasons = "; ".join(str(r) for r in verdict_ev.data.get("refusals") or [])
            verdict = (
                f'<span class="refused">REFUSED</span> at t = {seconds_text(verdict_ev.t)}: {esc(reasons)}'
            )
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
                    seconds_text(e.t),
                    esc(e.who),
                    f"<code>{esc(data.get('item'))}</code>",
                    esc(data.get("prompt")),
                    answer_text(data),
                    f"OD {num(req, 'g')}" if req is not None else "–",
                    result,
                    esc(data.get("via")),
                ]
            )
            if data.get("kind") == "eyewear":
                lam = data.get("wavelength_m")
                ans = data.get("answer")
                eyewear_rows.append(
                    [
                        num(lam * 1e9, ".1f", "nm") if isinstance(lam, (int, float)) else "–",
                        num(ans, "g"),
                        num(req, "g"),
                        result,
                        esc(e.who),
                        seconds_text(e.t),
                    ]
                )
        out.append(
            table(
                ["t", "operator", "item", "question / check", "answer", "required", "result", "given via"],
                rows,
            )
        )
    if eyewear_rows:
        out.append("<h3>Laser-safety eyewear: optical density confirmed vs required</h3>")
        out.append(
            table(["wavelength", "OD confirmed", "OD required", "result", "operator", "t"], eyewear_rows)
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
                f"by {esc(t.get('acknowledged_by'))} at t = {seconds_text(t.get('acknowledged_at'))}"
                if t.get("acknowledged_at") is not None
                else '<span class="refused">NOT acknowledged</span>'
            )
            rows.append(
                [
                    seconds_text(t.get("t")),
                    esc(t.get("reason")),
                    f"<code>{esc(t.get('condition'))}</code>",
                    seconds_text(t.get("seen_at")),
                    (lat_text, "num"),
                    ack,
                ]
            )
        out.append(
            table(
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
                seconds_text(e.t),
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
        out.append(table(["t", "request", "from", "to", "accepted", "by", "reason"], guard_rows))
    return "\n".join(out)


def settings_section(d: ReportData) -> str:
    c = d.cfg
    s, pr, pu, g = c.sample, c.probe, c.pump, c.guard
    u = s.uncertainty
    sample = [
        ("Label", esc(s.label)),
        ("Sample id", esc(s.sample_id)),
        ("Length L", f"{num(s.length * 1e3, '.4g', 'mm')} (±{num(u.length * 1e3, '.2g', 'mm')})"),
        (
            "Dopant density N",
            f"{num(s.n_total * 1e-6, '.4g', 'cm⁻³')} = {num(s.n_total, '.4g', 'm⁻³')} "
            f"(±{num(u.n_total * 100, '.2g')} %)",
        ),
        ("Emission cross-section at the probe σe", num(s.sigma.probe_emission * 1e4, ".4g", "cm²")),
        ("Absorption cross-section at the probe σa", num(s.sigma.probe_absorption * 1e4, ".4g", "cm²")),
        ("Absorption cross-section at the pump", num(s.sigma.pump_absorption * 1e4, ".4g", "cm²")),
        ("Emission cross-section at the pump", num(s.sigma.pump_emission * 1e4, ".4g", "cm²")),
        ("Cross-section uncertainty", f"±{num(u.cross_sections * 100, '.2g')} % each"),
        (
            "Upper-state lifetime (configured)",
            f"{num(s.upper_state_lifetime * 1e3, '.4g', 'ms')} "
            f"(±{num(u.upper_state_lifetime * 100, '.2g')} %)",
        ),
        ("Temperature", num(s.temperature, ".5g", "K")),
        ("Refractive index", num(s.refractive_index, ".4g")),
        ("Cross-section spectrum file", esc(s.spectrum_file) if s.spectrum_file else "none"),
    ]
    lasers = [
        ("Probe wavelength", num(pr.wavelength * 1e9, ".5g", "nm")),
        ("Probe power", num(pr.power * 1e3, ".4g", "mW")),
        ("Probe beam diameter (1/e²)", num(pr.beam_diameter * 1e3, ".4g", "mm")),
        ("Probe kind", esc(pr.kind)),
        ("Probe pulse energy", num(pr.pulse_energy, ".4g", "J") if pr.pulse_energy else "–"),
        ("Weak-probe limit I/I_sat", num(pr.weak_fraction, ".3g")),
        ("Pump wavelength", num(pu.wavelength * 1e9, ".5g", "nm")),
        ("Pump current limit (tool)", num(pu.max_current, ".4g", "A")),
        ("Pump diode current rating", num(pu.diode_current_rating, ".4g", "A")),
        ("Pump threshold current", num(pu.threshold_current, ".4g", "A")),
        ("Pump slope efficiency", num(pu.slope_efficiency, ".4g", "W/A")),
        ("Pump power at the limit", num(pu.max_power, ".4g", "W")),
        ("Pump beam diameter (1/e²)", num(pu.beam_diameter * 1e3, ".4g", "mm")),
    ]
    guard = [
        ("Maximum current", num(g.max_current, ".4g", "A")),
        ("Current tolerance", num(g.current_tolerance, ".3g", "A")),
        (
            "Mount temperature window",
            f"{num(g.mount_temperature_min, '.5g', 'K')} to "
            f"{num(g.mount_temperature_max, '.5g', 'K')} "
            f"({num(g.mount_temperature_min - 273.15, '.3g')} to "
            f"{num(g.mount_temperature_max - 273.15, '.3g', '°C')})",
        ),
        ("Detector full-scale trip", f"{num(g.full_scale_fraction * 100, '.3g')} % of range"),
        ("Stale readings after", num(g.stale_after, ".3g", "s")),
        ("Communication failures before a trip", num(g.comm_failures, "d")),
        (
            "Sudden transmission change trip",
            f"{num(g.transmission_jump * 100, '.3g')} % relative change" if g.transmission_jump else "off",
        ),
    ]
    sim = c.simulation
    simulation = (
        []
        if sim is None
        else [
            ("Random seed", num(sim.seed, "d")),
            ("Probe signal, unpumped", num(sim.probe_signal, ".4g", "V")),
            ("Reference signal", num(sim.reference_signal, ".4g", "V")),
            ("Detector noise", num(sim.detector_noise * 1e3, ".3g", "mV rms per sample")),
            ("Relative intensity noise", num(sim.relative_intensity_noise, ".3g")),
            (
                "Dark levels (probe, reference)",
                f"{num(sim.dark_probe * 1e3, '.3g')}, {num(sim.dark_reference * 1e3, '.3g', 'mV')}",
            ),
            ("Source drift", f"{num(sim.drift_per_hour * 100, '.3g')} % per hour"),
            ("Digitiser resolution", num(sim.adc_bits, "d", "bits")),
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
        + kv_table(sample)
        + "<h3>Probe and pump lasers</h3>"
        + kv_table(lasers)
        + "<h3>Instruments</h3>"
        + table(["role", "driver", "resource", "profile", "identity (as recorded)"], inst_rows)
        + "<h3>Guard limits</h3>"
        + kv_table(guard)
        + ("<h3>Simulator settings (SIMULATED bench)</h3>" + kv_table(simulation) if simulation else "")
    )


def meta_section(d: ReportData) -> str:
    m = d.meta
    faults = m.get("faults")
    rows = [
        ("Run id", esc(d.run_id)),
        ("Run file", f"<code>{esc(d.run_path)}</code>"),
        ("Status", esc(d.status)),
        ("Start time", esc(m.get("start_time"))),
        ("Stop time", esc(m.get("stop_time") or "(none)")),
        ("Stop reason", esc(m.get("stop_reason") or "–")),
        ("Duration", num(d.duration_s, ".3f", "s")),
        ("Operator", esc(m.get("operator") or "(none recorded)")),
        ("Mode", esc(m.get("mode"))),
        ("Simulated", "<strong>YES: SIMULATED BENCH</strong>" if d.simulated else "no (real instruments)"),
        ("Recorded with gainbench", esc(m.get("software_version"))),
        ("Bench", esc(m.get("bench_name"))),
        ("Bench file", esc(m.get("bench_source"))),
        ("Platform", esc(m.get("platform"))),
        ("Run file schema", esc(m.get("schema_version"))),
        ("Blocks stored", num(d.block_count, ",d")),
        ("Detector samples (figure 1)", num(d.extra.get("signal_samples"), ",d")),
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
    return '<h2 id="meta">Run</h2>' + kv_table(rows)
