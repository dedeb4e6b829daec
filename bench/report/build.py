"""A run's report: PNG figures and one HTML page, written into an output directory.

`build_report` reads a stored run (never writing it), gathers what a reviewer needs (the run's
meta, the bench file as recorded, the estimates of one or more analyses with the simulator's
truth beside them, the arming checklist, the guard's trips, the events) into a `ReportData`,
draws the figures (`bench.report.signal_figure`, `estimate_figures`, `timeline_figure`), and
writes ``report.html`` (`bench.report.html`) with the figures beside it. The page embeds each
figure as a base64 PNG, so ``report.html`` alone is complete; the same PNG files stay in the
directory for reuse.

Default output directory: ``<directory of the run file>/<run_id>-report/``.
"""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from bench.errors import GainbenchError
from bench.report import html as report_html
from bench.report.cross_section_figure import cross_section_figure
from bench.report.data import (
    ALL,
    LIVE,
    AnalysisData,
    FigureFile,
    ReportData,
    parse_analysis,
)
from bench.report.estimate_figures import (
    decay_figure,
    estimates_figure,
    saturation_figure,
    spectrum_figure,
    truth_series,
)
from bench.report.figure_style import save_png
from bench.report.pulse_figure import pulse_figure
from bench.report.signal_data import signal_trace
from bench.report.signal_figure import signals_figure
from bench.report.timeline_figure import timeline_figure
from bench.run.replay import run_config
from bench.store import RunReader, resolve_run
from bench.store.summary import summary, trips

HTML_NAME = "report.html"


class ReportError(GainbenchError):
    """The report cannot be written (output directory is a file, not writable, ...)."""


@dataclass(frozen=True)
class ReportResult:
    html: Path
    out_dir: Path
    figures: tuple[FigureFile, ...]
    analyses: tuple[int, ...]


# --------------------------------------------------------------------------------------------
# Choosing analyses


def select_analyses(analyses: Sequence[Mapping[str, Any]], which: str | int, path: Path) -> list[int]:
    """Ids of the analyses to show: the live one (or the first), one id, or all."""
    which = parse_analysis(which)
    ids = [int(a["id"]) for a in analyses]
    if not ids:
        return []
    if which == ALL:
        return ids
    if which == LIVE:
        live = [int(a["id"]) for a in analyses if a.get("kind") == "live"]
        return [live[0] if live else ids[0]]
    if which not in ids:
        raise ReportError(f"{path}: has no analysis {which} (its analyses: {', '.join(map(str, ids))})")
    return [int(which)]


def recorded_value(bench_text: str, key: str) -> str:
    """The value of dotted ``key`` in the bench file as recorded, as text."""
    try:
        node: Any = tomllib.loads(bench_text)
    except tomllib.TOMLDecodeError:
        return "(bench file not readable)"
    for part in key.split("."):
        if not isinstance(node, Mapping) or part not in node:
            return "(not in the bench file)"
        node = node[part]
    return str(node)


# --------------------------------------------------------------------------------------------
# Reading


def collect(reader: RunReader, which: str | int = LIVE) -> ReportData:
    """Read what the report shows from an open run."""
    cfg = run_config(reader)
    all_analyses = reader.analyses()
    ids = select_analyses(all_analyses, which, reader.path)
    events = reader.events()
    bench_text = reader.meta.get("bench_text", "")
    chosen = []
    for a in all_analyses:
        if int(a["id"]) not in ids:
            continue
        overrides = a.get("overrides") if isinstance(a.get("overrides"), Mapping) else {}
        overridden = [(str(k), recorded_value(bench_text, str(k)), str(v)) for k, v in overrides.items()]
        estimates = reader.estimates(int(a["id"]))
        final = next((e for e in reversed(estimates) if e.scope == "cumulative"), None)
        chosen.append(
            AnalysisData(
                id=int(a["id"]),
                kind=str(a.get("kind")),
                info=a,
                overrides=dict(overrides),
                overridden=overridden,
                estimates=estimates,
                final=final,
                summary=summary(reader, cfg, int(a["id"])),
            )
        )
    return ReportData(
        run_path=reader.path,
        run_id=reader.run_id,
        status=reader.status,
        meta=dict(reader.meta),
        cfg=cfg,
        duration_s=reader.duration(),
        block_count=reader.block_count(),
        all_analyses=all_analyses,
        analyses=chosen,
        events=events,
        truth=reader.truth(),
        trips=trips(events),
        generated_at=datetime.now(UTC).isoformat(timespec="seconds"),
    )


# --------------------------------------------------------------------------------------------
# Output directory


def default_out_dir(run_path: Path, run_id: str) -> Path:
    return Path(run_path).parent / f"{run_id}-report"


def prepare_out_dir(out: Path) -> Path:
    """Make ``out`` (and its parents); ReportError naming it if it is a file or not writable."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise ReportError(f"{out}: is a file, not a directory (expected the report's output directory)")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"{out}: cannot create the report directory ({exc.strerror or exc})") from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise ReportError(f"{out}: the report directory is not writable")
    return out


def _write_text(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise ReportError(f"{path}: cannot write the report ({exc.strerror or exc})") from None


# --------------------------------------------------------------------------------------------
# Figures


def draw_figures(reader: RunReader, data: ReportData, out: Path, *, buckets: int = 800) -> list[FigureFile]:
    """Draw and save every figure the run has data for."""
    written: list[FigureFile] = []
    failed: list[tuple[str, str]] = data.extra.setdefault("figure_errors", [])

    def save(key: str, make, title: str, caption: str) -> None:
        # the run file is untrusted input: a figure whose data are malformed is named on the page
        # instead of stopping the whole report
        try:
            fig = make()
        except (KeyError, TypeError, ValueError, IndexError) as exc:
            failed.append((title, f"{type(exc).__name__}: {exc}"))
            return
        if fig is None:
            return
        path = out / f"fig-{key}.png"
        try:
            save_png(fig, path)
        except OSError as exc:
            raise ReportError(f"{path}: cannot write the figure ({exc.strerror or exc})") from None
        finally:
            fig.clear()
        written.append(FigureFile(key, path, title, caption))

    rid = data.run_id
    sig = signal_trace(reader, data.events, buckets=buckets, duration=data.duration_s)
    data.extra["signal_samples"] = sig.trace.samples
    data.extra["signal_bucket_s"] = sig.trace.width
    pump_text = (
        "Grey: the pump driver reported its output on."
        if sig.pump_on is not None
        else "The pump driver's output state was not recorded."
    )
    dark_text = (
        "S uses the dark captured in the run (dotted boxes: the dark captures, where S is not defined)."
        if sig.darks
        else "No dark was captured: S assumes zero volts of dark."
    )
    save(
        "signals",
        lambda: signals_figure(sig, title=rid),
        "Signals",
        f"Probe and reference detector voltages, the normalised transmission S and the pump monitor over "
        f"the whole run, decimated to {sig.trace.edges.size - 1} time buckets of "
        f"{sig.trace.width * 1e3:.3g} ms: the band spans each bucket's lowest to highest sample, the line is "
        f"its mean. {pump_text} {dark_text} The S axis spans the 0.5 to 99.5 percentiles of the buckets.",
    )

    truth = None
    if data.simulated and data.truth:
        truth = truth_series(data.truth, data.cfg.sample.sigma.probe_absorption)
    truth_text = (
        " Black crosses: the simulator's truth, sampled at instants while the pump was on."
        if truth is not None
        else ""
    )
    series = [(a.label, a.estimates) for a in data.analyses]
    save(
        "estimates",
        lambda: estimates_figure(series, truth, title=rid, trips=[float(t["t"]) for t in data.trips]),
        "Estimates over time",
        "Excited fraction β and single-pass net gain (ln R where neither is known): the cumulative "
        "estimate (everything since the mode or setting last changed) with its ±2σ band (combined: noise "
        "and systematic), and each window's own estimate as a point with ±2σ of its noise part."
        + truth_text
        + (" Dashed vermillion: the guard's trips." if data.trips else ""),
    )

    for a in data.analyses:
        final = a.final
        name = f" ({a.label})" if len(data.analyses) > 1 or a.kind != "live" else ""
        truth_rows = data.truth if data.simulated else None
        save(
            f"decay-a{a.id}",
            lambda final=final: (
                decay_figure(final, title=rid) if final is not None and final.mode == "decay" else None
            ),
            f"Lifetime fit{name}",
            "ln R(t) after each pump-off edge, averaged over the decays and binned, with the fitted "
            "exponential ln R(0) exp(−t/τ_d); lower panel: each bin's residual divided by its standard "
            "uncertainty (dotted: ±2). The lifetime τ removes the probe's own stimulated rate from τ_d.",
        )
        save(
            f"saturation-a{a.id}",
            lambda final=final, truth_rows=truth_rows: (
                saturation_figure(final, truth_rows, title=rid)
                if final is not None and final.mode == "sweep"
                else None
            ),
            f"Pump saturation{name}",
            "Excited fraction β at each pump-power step (error bars: ±1σ noise, the weights of the fit) "
            "and the fitted saturation curve.",
        )
        save(
            f"spectrum-a{a.id}",
            lambda final=final: (
                spectrum_figure(final, title=rid) if final is not None and final.mode == "sweep" else None
            ),
            f"Gain spectrum{name}",
            "Pump-induced gain change ln R / L at each probe wavelength (±1σ noise) with the fitted Voigt "
            "line (in optical frequency).",
        )
        save(
            f"cross-sections-a{a.id}",
            lambda final=final: cross_section_figure(final, title=rid),
            f"Cross-section spectra{name}",
            "Absorption and emission cross-sections at each probe wavelength of a spectrum run (bands: "
            "±2σ, noise and systematic); lower panel: the gain cross-section β σe − (1 − β) σa for a "
            "family of excited fractions β, and at the measured β.",
        )

        save(
            f"pulses-a{a.id}",
            lambda final=final: pulse_figure(final, title=rid),
            f"Pulsed shots{name}",
            "The mean gain transient ln R(t) after the trigger over the shots (band: ±2σ of the mean, "
            "from the shot-to-shot scatter), the pump pulse shaded; lower panel: each shot's peak ln R "
            "(circles, left axis) and decay time (triangles, right axis) on the run's time axis.",
        )

    t_end = float(data.duration_s or 0.0)
    save(
        "events",
        lambda: timeline_figure(data.events, t_end, data.trips, title=rid),
        "Events",
        "Every recorded event on the run's time axis, one row per kind; top: the guard's state from its "
        "accepted transitions. A dashed line marks each trip, with the time from the failing reading to "
        "the pump-off command (latency).",
    )
    return written


# --------------------------------------------------------------------------------------------
# The whole report


def build_report(
    run: str | Path,
    out_dir: str | Path | None = None,
    *,
    analysis: str | int = LIVE,
    log_dir: str | Path = "logs",
    buckets: int = 800,
) -> ReportResult:
    """Write ``report.html`` and its figures for ``run`` (a path, run id or unique prefix).

    Parameters
    ----------
    run : the run file, or its id (or a unique prefix of one) in ``log_dir``.
    out_dir : where to write; default ``<run file's directory>/<run_id>-report``.
    analysis : ``"live"`` (default), ``"all"``, or an analysis id.
    buckets : time buckets of the decimated signal figure.
    """
    which = parse_analysis(analysis)
    if isinstance(buckets, bool) or not isinstance(buckets, int) or buckets < 10:
        raise ValueError(f"buckets: expected a whole number of at least 10, got {buckets!r}")
    path = Path(run) if isinstance(run, Path) else resolve_run(str(run), log_dir)
    with RunReader(path) as reader:
        data = collect(reader, which)
        out = prepare_out_dir(Path(out_dir) if out_dir is not None else default_out_dir(path, data.run_id))
        figures = draw_figures(reader, data, out, buckets=buckets)
    html_path = out / HTML_NAME
    try:
        page = report_html.render(data, figures)  # reads the figures back to embed them
    except OSError as exc:
        raise ReportError(
            f"{exc.filename or out}: cannot read a figure back ({exc.strerror or exc})"
        ) from None
    _write_text(html_path, page)
    return ReportResult(html_path, out, tuple(figures), tuple(a.id for a in data.analyses))
