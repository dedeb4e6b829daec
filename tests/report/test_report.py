"""`gainbench report`: figures (PNG) and the HTML page of recorded runs on the simulated bench.

Runs are recorded through the real command line (module-scoped, short). The page is parsed with
the standard library's ``html.parser``; the PNGs are opened with matplotlib and PIL. External
references: the decimator is checked against a plain numpy min/max per bucket; a re-analysis
with a longer sample must scale beta by L_old / L_new (beta = ln R / ((sigma_e + sigma_a) L N),
W. Koechner, Solid-State Laser Engineering, 6th ed., 2006, sec. 1.4); the drawn Voigt line's
width is checked against the Olivero-Longbothum approximation (J. J. Olivero and
R. L. Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17, 233 (1977), accurate to about
0.02 %).
"""

from __future__ import annotations

import base64
import hashlib
import io
import math
import os
import re
from contextlib import redirect_stderr, redirect_stdout
from html.parser import HTMLParser

import matplotlib.image
import numpy as np
import pytest
from scipy import constants

from bench.cli import main
from bench.config import builtin_bench_path, load_bench
from bench.errors import RunStoreError
from bench.estimator import (
    Baseline,
    Dark,
    EstimatorParams,
    new_state,
    report,
    update,
    with_baseline,
    with_dark,
    with_setting,
)
from bench.physics import fitting
from bench.records import Block, Event
from bench.report.build import ReportError, build_report, parse_analysis
from bench.report.estimate_figures import spectrum_curve
from bench.report.signal_data import MinMaxDecimator, pump_intervals
from bench.report.timeline_figure import guard_segments
from bench.store import RunReader, RunWriter

ARM = ["--eyewear-od", "940nm=5", "--eyewear-od", "1030nm=2", "--confirm-setup"]
HOSTILE = "<script>alert('x')</script> & Co"
HOSTILE_LABEL = "Yb:FHW-7 <img src=x onerror=alert(1)> (invented, demo only)"


def _cli(args):
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(args)
    return code, out.getvalue(), err.getvalue()


def _bench_file(directory):
    """The demo bench with a sample label that is markup, and a guard that waits 3 s, not 0.5 s,
    for fresh pump readings (a loaded test machine would otherwise trip before arming)."""
    text = builtin_bench_path().read_text(encoding="utf-8")
    for old, new in (
        ('stale_after = "0.5 s"', 'stale_after = "3 s"'),
        ('label = "Yb:FHW-7 (invented Yb-doped tungstate, demo only)"', f'label = "{HOSTILE_LABEL}"'),
    ):
        assert old in text, old
        text = text.replace(old, new)
    path = directory / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _record(logs, *extra, operator="tester", may_trip=False):
    bench = _bench_file(logs)
    code, out, err = _cli(
        [
            "record",
            "--quiet",
            "--config",
            str(bench),
            "--logs",
            str(logs),
            "--operator",
            operator,
            *ARM,
            *extra,
        ]
    )
    found = re.search(r"gainbench: run (\S+) on ", out)
    assert found, out + err
    run_id = found.group(1)
    if code != 0:
        # a scheduled fault on a loaded machine may come before the pump is on: the guard then
        # trips on the refused output-on command instead, and the recorder reports it
        assert may_trip, out + err
        with RunReader(logs / f"{run_id}.gbrun") as r:
            assert any(e.kind == "trip" for e in r.events()), out + err
    return run_id


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    logs = tmp_path_factory.mktemp("logs")
    out = {
        # run by an operator whose name is markup, to check that the page escapes it
        "watch": _record(logs, "--mode", "watch", "--seconds", "1.5", operator=HOSTILE),
        # the interlock opens while the pump emits
        "tripped": _record(
            logs, "--mode", "watch", "--seconds", "3", "--fault", "interlock@2.5s+0.3s", may_trip=True
        ),
        "decay": _record(logs, "--mode", "decay", "--seconds", "1.5"),
        "sweep": _record(logs, "--mode", "sweep", "--seconds", "2.4", "--steps", "4"),
    }
    code, text, err = _cli(
        ["replay", out["decay"], "--logs", str(logs), "--headless", "--set", "sample.length=5.1mm"]
    )
    assert code == 0, text + err
    digests = {
        name: hashlib.sha256((logs / f"{rid}.gbrun").read_bytes()).hexdigest() for name, rid in out.items()
    }
    return logs, out, digests


@pytest.fixture(scope="module")
def reports(runs, tmp_path_factory):
    logs, ids, _ = runs
    built = {}
    for name, rid in ids.items():
        built[name] = build_report(rid, log_dir=logs, buckets=300)
    built["decay-all"] = build_report(
        ids["decay"], tmp_path_factory.mktemp("all"), analysis="all", log_dir=logs, buckets=300
    )
    return built


class Page(HTMLParser):
    """Collects text, tags, attributes and nesting errors of a page."""

    VOID = {"meta", "img", "br", "hr", "link", "input", "source"}

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.tags: set[str] = set()
        self.images: list[str] = []
        self.hrefs: list[str] = []
        self.chunks: list[str] = []
        self.feed(text)
        self.close()
        if self.stack:
            self.errors.append(f"unclosed: {self.stack}")

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        a = dict(attrs)
        if tag == "img":
            self.images.append(a.get("src", ""))
        if "href" in a:
            self.hrefs.append(a["href"])
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
            return
        self.stack.pop()

    def handle_data(self, data):
        self.chunks.append(data)

    @property
    def text(self) -> str:
        return re.sub(r"\s+", " ", " ".join(self.chunks))


def _page(result) -> tuple[str, Page]:
    raw = result.html.read_text(encoding="utf-8")
    page = Page(raw)
    assert not page.errors, page.errors[:5]
    return raw, page


def _check_png(path):
    from PIL import Image

    with Image.open(path) as im:
        assert im.format == "PNG"
        width, height = im.size
    # readable at normal size: between 600 and 1600 px wide, not a sliver (common practice, no source)
    assert 600 <= width <= 1600 and 300 <= height <= 1600, (path.name, width, height)
    pixels = matplotlib.image.imread(path)
    assert pixels.shape[:2] == (height, width)
    assert pixels.std() > 0.02, f"{path.name} looks blank"


def _check_common(result, page: Page):
    assert result.html.name == "report.html" and result.html.is_file()
    for f in result.figures:
        assert f.path.parent == result.out_dir and f.path.is_file()
        _check_png(f.path)
    # self-contained: every image embedded, nothing fetched, no script
    assert len(page.images) == len(result.figures)
    by_name = {f.path.name: f.path.read_bytes() for f in result.figures}
    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1]) in by_name.values()
    assert all(h.startswith("#") for h in page.hrefs)
    assert "script" not in page.tags and "link" not in page.tags
    assert "SIMULATED BENCH" in page.text
    # the checklist answers with their operator (the demo bench asks for both wavelengths)
    assert "eyewear@940nm" in page.text and "OD 5" in page.text and "OD 4" in page.text
    assert "beam_enclosed" in page.text


def _check_trips(page: Page, path) -> list:
    """The page reports the run's trips as stored: reason, latency, acknowledgement (a loaded
    machine can make any run trip on stale readings, so every report is checked this way)."""
    with RunReader(path) as r:
        events = r.events()
    trips = [e for e in events if e.kind == "trip"]
    if not trips:
        assert "The guard did not trip in this run." in page.text and "THE GUARD TRIPPED" not in page.text
        return trips
    assert f"THE GUARD TRIPPED {len(trips)} time" in page.text
    for trip in trips:
        assert trip.data["reason"] in page.text
        latency = trip.data.get("latency_s")
        assert (f"{latency * 1e3:.1f} ms" if latency is not None else "unknown") in page.text
    acks = [
        e
        for e in events
        if e.kind == "guard" and e.data.get("from") == "tripped" and e.data.get("to") == "safe"
    ]
    for ack in acks:
        assert f"by {ack.who} at t = {ack.t:.3f} s" in page.text
    if len(acks) < len(trips):
        assert "NOT acknowledged" in page.text
    return trips


# ---------------------------------------------------------------------------------- reports


def test_a_watch_run_reports_its_estimates_with_their_uncertainties(runs, reports):
    logs, ids, _ = runs
    result = reports["watch"]
    raw, page = _page(result)
    _check_common(result, page)
    keys = {f.key for f in result.figures}
    assert {"signals", "estimates", "events"} <= keys
    assert not any(k.startswith(("decay", "saturation", "spectrum")) for k in keys)
    _check_trips(page, logs / f"{ids['watch']}.gbrun")
    with RunReader(logs / f"{ids['watch']}.gbrun") as r:
        final = r.final_estimate()
    from bench.report.html_format import pm_text, quantity_cells

    beta = final.values["beta"]
    assert pm_text(beta.value, beta.sigma) in page.text
    for key in ("ln_ratio", "gain_db", "gain_coefficient_per_cm", "n2_per_m3", "beta"):
        q = final.values[key]
        cells = quantity_cells(q.value, q.sigma, q.sigma_noise, q.sigma_systematic)[:4]
        assert all(c in page.text for c in cells), (key, cells)
    assert "simulator truth" in page.text


def test_a_tripped_run_reports_the_trip_its_latency_and_acknowledgement(runs, reports):
    logs, ids, _ = runs
    result = reports["tripped"]
    raw, page = _page(result)
    _check_common(result, page)
    assert _check_trips(page, logs / f"{ids['tripped']}.gbrun"), "the run has a trip"


def test_text_from_the_run_is_escaped(reports):
    raw, page = _page(reports["watch"])
    assert HOSTILE in page.text and HOSTILE_LABEL in page.text  # shown as text ...
    assert "<script>" not in raw and "alert('x')</script>" not in raw  # ... never as markup
    assert "<img src=x" not in raw and len(page.images) == len(reports["watch"].figures)
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt; &amp; Co" in raw


def test_a_decay_run_has_the_lifetime_fit(runs, reports):
    logs, ids, _ = runs
    result = reports["decay"]
    raw, page = _page(result)
    _check_common(result, page)
    assert "decay-a1" in {f.key for f in result.figures}
    _check_trips(page, logs / f"{ids['decay']}.gbrun")
    with RunReader(logs / f"{ids['decay']}.gbrun") as r:
        tau = r.final_estimate(1).values["tau_s"]
    from bench.report.html_format import quantity_cells

    assert quantity_cells(tau.value * 1e3, tau.sigma * 1e3, tau.sigma_noise * 1e3, 0.0)[0] in page.text
    # default: the live analysis only, but the page lists the re-analysis and its overrides
    assert result.analyses == (1,)
    assert "sample.length" in page.text and "5.1mm" in page.text


def test_a_reanalysis_shows_its_overrides_and_both_estimates(runs, reports):
    logs, ids, _ = runs
    result = reports["decay-all"]
    raw, page = _page(result)
    _check_common(result, page)
    assert result.analyses == (1, 2)
    assert {"decay-a1", "decay-a2"} <= {f.key for f in result.figures}
    assert "Side by side" in page.text
    assert "parameter as recorded override used sample.length 5 mm 5.1mm" in page.text
    with RunReader(logs / f"{ids['decay']}.gbrun") as r:
        b1, b2 = r.final_estimate(1).values["beta"], r.final_estimate(2).values["beta"]
    from bench.report.html_format import pm_text

    assert pm_text(b1.value, b1.sigma) in page.text and pm_text(b2.value, b2.sigma) in page.text
    # beta = ln R / ((sigma_e + sigma_a) L N) + beta_off: the same ln R over 5.1 mm instead of
    # 5 mm (Koechner, sec. 1.4); the probe-held beta_off does not depend on L. To 1e-6 only, as
    # the pumped rise (so the settle window, so which samples are used) depends on the pump
    # absorbance sigma_ap N L
    from bench.config import load_bench
    from bench.estimator import EstimatorParams, probe_terms

    held = probe_terms(EstimatorParams.from_config(load_bench()))[2]
    assert (b2.value - held) / (b1.value - held) == pytest.approx(5.0 / 5.1, rel=1e-6)


def test_a_sweep_run_has_the_saturation_fit(runs, reports):
    logs, ids, _ = runs
    result = reports["sweep"]
    raw, page = _page(result)
    _check_common(result, page)
    assert "saturation-a1" in {f.key for f in result.figures}
    _check_trips(page, logs / f"{ids['sweep']}.gbrun")
    with RunReader(logs / f"{ids['sweep']}.gbrun") as r:
        final = r.final_estimate()
    # four steps: three closed ones are fitted, and the fit's figures are in the table
    from bench.report.html_format import quantity_cells

    for key in ("beta_max", "p_sat_w"):
        q = final.values[key]
        assert quantity_cells(q.value, q.sigma, q.sigma_noise, q.sigma_systematic)[0] in page.text
    assert "saturated excited fraction β_max" in page.text


def test_reading_for_a_report_never_changes_the_run_file(runs, reports):
    logs, ids, digests = runs
    assert reports  # every report of the module has been written from these runs
    for name, rid in ids.items():
        assert hashlib.sha256((logs / f"{rid}.gbrun").read_bytes()).hexdigest() == digests[name], name


def test_the_command_line_writes_the_report_and_prints_its_path(runs, tmp_path):
    logs, ids, _ = runs
    out = tmp_path / "cli"
    code, text, err = _cli(
        [
            "report",
            ids["decay"][:15],
            "--logs",
            str(logs),
            "--out",
            str(out),
            "--analysis",
            "2",
            "--buckets",
            "100",
        ]
    )
    assert code == 0, err
    assert text.strip() == str(out / "report.html")
    page = Page((out / "report.html").read_text(encoding="utf-8"))
    assert "analysis 2 (reanalysis)" in page.text
    code, text, err = _cli(
        ["report", ids["decay"], "--logs", str(logs), "--analysis", "9", "--out", str(out)]
    )
    assert code == 2 and "has no analysis 9" in err


# ---------------------------------------------------------------------------------- spectrum


def _wavelength_sweep_run(log_dir):
    """A probe-wavelength sweep through the real estimator: the recorder has no wavelength
    source yet, so blocks of a Voigt gain line (invented test data) are written directly."""
    cfg = load_bench()
    params = EstimatorParams.from_config(cfg, pump_threshold_v=0.25)
    rate, n_step, ref, s_off = 20e3, 2000, 0.6, 1.3
    dt = 1.0 / rate
    dark = Dark(0.003, 0.0, 0.002, 0.0, 1000, 0.0)
    line = (40.0, constants.c / 1031e-9, 1.5e12, 1.0e12)
    rng = np.random.default_rng(11)
    state = with_baseline(
        with_dark(new_state(params, "sweep"), dark), Baseline(s_off, 1e-7, 10_000, 0.0, -0.1)
    )
    writer = RunWriter.from_config(cfg, mode="sweep", log_dir=log_dir)
    writer.append_event(Event(0.0, "note", HOSTILE, who="<b>someone</b>"))
    i = seq = 0
    for lam in np.linspace(1005e-9, 1058e-9, 9):
        state = with_setting(state, probe_wavelength=float(lam))
        writer.append_event(Event(i * dt, "setting", f"probe wavelength {lam * 1e9:.1f} nm"))
        lnr = params.length * fitting.voigt_line(constants.c / lam, *line)
        vr = dark.reference + ref + rng.normal(0.0, 6e-4, n_step)
        vp = dark.probe + s_off * math.exp(lnr) * ref + rng.normal(0.0, 6e-4, n_step)
        data = np.column_stack([vp, vr, np.full(n_step, 0.5)])
        for k in range(0, n_step, 500):
            block = Block(
                "detector",
                seq,
                (i + k) * dt,
                dt,
                i + k,
                ("probe", "reference", "pump_monitor"),
                data[k : k + 500],
            )
            writer.append_block(block)
            state, estimates = update(state, block)
            writer.append_estimates(estimates)
            seq += 1
        i += n_step
    writer.append_estimates(report(state))
    writer.close()
    return writer.path


def test_a_probe_wavelength_sweep_has_the_gain_spectrum(tmp_path):
    path = _wavelength_sweep_run(tmp_path / "logs")
    result = build_report(path, buckets=100)
    assert result.out_dir == path.parent / f"{path.stem}-report"
    raw, page = _page(result)
    assert "spectrum-a1" in {f.key for f in result.figures}
    for f in result.figures:
        _check_png(f.path)
    assert "gain line centre" in page.text
    assert HOSTILE in page.text and "<b>someone</b>" in page.text
    assert "<script>" not in raw and "<b>someone" not in raw
    assert "No arming checklist was run in this run." in page.text


def test_a_figure_whose_stored_data_are_malformed_is_named_not_fatal(tmp_path):
    from bench.records import Estimate, Quantity

    cfg = load_bench()
    writer = RunWriter.from_config(cfg, mode="decay", log_dir=tmp_path / "logs")
    writer.append_estimates(
        [
            Estimate(
                1.0,
                "decay",
                "cumulative",
                {"tau_s": Quantity(6e-4, 1e-6, 1e-6, 0.0)},
                extra={"curve": {"t_s": [1e-4, 2e-4]}, "fit": {}},
            )
        ]
    )  # no ln_ratio
    writer.close()
    raw, page = _page(build_report(writer.path, buckets=20))
    assert 'Figure "Lifetime fit" could not be drawn' in page.text and "KeyError" in page.text
    assert "upper-state lifetime τ" in page.text  # the rest of the page is there


def test_the_drawn_voigt_line_has_the_fitted_width():
    # a line of known parameters; its half-maximum width, measured on the drawn curve, must match
    # the Olivero-Longbothum FWHM (0.02 %) computed by bench.physics.fitting.voigt_fwhm
    sg, gl, nu0 = 1.5e12, 1.0e12, constants.c / 1031e-9
    spec = {
        "peak_gain_change_per_m": 40.0,
        "centre_hz": nu0,
        "gaussian_fwhm_hz": 2 * math.sqrt(2 * math.log(2)) * sg,
        "lorentzian_fwhm_hz": 2 * gl,
    }
    lam = np.linspace(990e-9, 1075e-9, 200_001)
    y = spectrum_curve(spec, lam)
    assert y.max() == pytest.approx(40.0, rel=1e-6)
    nu = constants.c / lam[y >= 20.0]
    assert (nu.max() - nu.min()) == pytest.approx(fitting.voigt_fwhm(sg, gl), rel=1e-3)


# ---------------------------------------------------------------------------------- decimation


def test_the_decimator_matches_a_plain_min_max_per_bucket():
    rng = np.random.default_rng(3)
    t = np.cumsum(rng.uniform(0.5e-3, 1.5e-3, 20_000))
    v = rng.normal(size=t.size)
    v[rng.integers(0, t.size, 50)] = np.nan  # left out
    dec = MinMaxDecimator(["v"], buckets=64, width=1e-4)  # far too narrow: merges many times
    i = 0
    while i < t.size:
        n = int(rng.integers(1, 900))
        dec.add(t[i : i + n], {"v": v[i : i + n]})
        i += n
    tr = dec.result()
    assert tr.edges.size - 1 <= 64 and tr.samples == t.size
    idx = np.floor((t - t[0]) / tr.width).astype(int)
    for b in range(tr.edges.size - 1):
        sel = (idx == b) & np.isfinite(v)
        if sel.any():
            assert tr.low["v"][b] == v[sel].min() and tr.high["v"][b] == v[sel].max()
            assert tr.mean["v"][b] == pytest.approx(v[sel].mean(), rel=1e-12, abs=1e-12)
        else:
            assert np.isnan(tr.low["v"][b])
    assert np.allclose(np.diff(tr.edges), tr.width)


def test_the_decimator_refuses_bad_input():
    with pytest.raises(ValueError, match="names"):
        MinMaxDecimator("probe")
    with pytest.raises(ValueError, match="buckets"):
        MinMaxDecimator(["a"], buckets=1)
    with pytest.raises(ValueError, match="width"):
        MinMaxDecimator(["a"], width=0.0)
    dec = MinMaxDecimator(["a"])
    with pytest.raises(ValueError, match="columns"):
        dec.add(np.arange(3.0), {"b": np.zeros(3)})
    with pytest.raises(ValueError, match="shape"):
        dec.add(np.arange(3.0), {"a": np.zeros(2)})


def test_guard_states_follow_accepted_transitions_only():
    def guard(t, frm, to, accepted=True, kind="guard"):
        return Event(t, kind, f"{frm} -> {to}", data={"from": frm, "to": to, "accepted": accepted})

    events = [
        guard(0.1, "safe", "safe"),
        guard(1.0, "safe", "armed"),
        guard(1.1, "armed", "emitting", False),
        guard(1.2, "armed", "emitting"),
        guard(2.0, "emitting", "tripped", kind="trip"),
        guard(2.5, "tripped", "safe"),
        Event(2.7, "note", "a note"),
    ]
    assert guard_segments(events, 3.0) == [
        (0.0, 1.0, "safe"),
        (1.0, 1.2, "armed"),
        (1.2, 2.0, "emitting"),
        (2.0, 2.5, "tripped"),
        (2.5, 3.0, "safe"),
    ]


def test_pump_intervals_come_from_the_drivers_output_state():
    class Reader:
        def iter_blocks(self, source=None, start=None, stop=None):
            states = [0, 0, 1, 1, 1, 0, 1, 1]
            for i, on in enumerate(states):
                yield Block("pump", i, 0.5 * i, 0.0, -1, ("pump_current", "pump_on"), np.array([[1.0, on]]))
            yield Block("detector", 0, 0.0, 1e-3, 0, ("probe",), np.zeros((4, 1)))  # no pump_on: ignored

    assert pump_intervals(Reader()) == ((1.0, 2.5), (3.0, 3.5))

    class Silent:
        def iter_blocks(self, source=None, start=None, stop=None):
            return iter(())

    assert pump_intervals(Silent()) is None


# ---------------------------------------------------------------------------------- bad input


def test_a_missing_run_is_a_clear_error(tmp_path):
    with pytest.raises(RunStoreError, match="no run matches 'nothing'"):
        build_report("nothing", log_dir=tmp_path)
    code, _, err = _cli(["report", str(tmp_path / "gone.gbrun")])
    assert code == 2 and "gone.gbrun" in err and "no such run file" in err


def test_an_unreadable_run_file_is_named(tmp_path):
    bad = tmp_path / "20260101-000000-x.gbrun"
    bad.write_bytes(b"this is not a run file at all" * 40)
    with pytest.raises(RunStoreError, match=re.escape(str(bad))):
        build_report(bad)


def test_an_output_directory_that_is_a_file_or_unwritable_is_refused(runs, tmp_path):
    logs, ids, _ = runs
    run = logs / f"{ids['decay']}.gbrun"
    blocker = tmp_path / "taken"
    blocker.write_text("x")
    with pytest.raises(ReportError, match=f"{re.escape(str(blocker))}: is a file"):
        build_report(run, blocker)
    with pytest.raises(ReportError, match="cannot create the report directory"):
        build_report(run, blocker / "inside")
    if os.name == "posix" and os.geteuid() != 0:  # root may write anywhere
        locked = tmp_path / "locked"
        locked.mkdir()
        locked.chmod(0o500)
        try:
            with pytest.raises(ReportError, match="not writable"):
                build_report(run, locked)
        finally:
            locked.chmod(0o700)


def test_analysis_choices_are_checked():
    assert parse_analysis(None) == "live" and parse_analysis("ALL") == "all" and parse_analysis("3") == 3
    for bad in ("x", "0", True, -1):
        with pytest.raises(ValueError, match="analysis"):
            parse_analysis(bad)
