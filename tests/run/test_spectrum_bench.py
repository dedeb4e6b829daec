"""The demo bench with a tunable probe, through the command line: `record --mode spectrum` with
its default wavelengths, summary, export of the measured spectrum read back by `gainbench
check`, replay, and the refusals of bad --wavelengths.

The outside reference is the simulated sample's own cross-sections at each step's wavelength
(`summary --json` gives them beside the estimates, from the simulator's truth rows recorded
during that step: simulated_instruments/lineshape.py, not the estimator). On a simulated
sample with no parameter error each measured sigma_a and sigma_e lies within 4 sigma_noise of
them. The replay is checked against the stored live estimates ("identical" in replay's compare).
"""

from __future__ import annotations

import io
import re
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest
from cli_flags import ARM
from cli_runs import record_run
from cli_runs import summary_json as summary

from bench.cli import main
from bench.config import load_bench

DATA = Path(__file__).resolve().parents[2] / "bench" / "data"
SPECTRUM_BENCH = str(DATA / "demo_spectrum_bench.toml")


def record(logs: Path, *extra: str) -> str:
    return record_run(logs, "--config", SPECTRUM_BENCH, "--mode", "spectrum", *extra)[0]


@pytest.fixture(scope="module")
def scan(tmp_path_factory):
    logs = tmp_path_factory.mktemp("spectrum-logs")
    run_id = record(logs, "--seconds", "1", "--speed", "2")  # default wavelengths: 1010 ... 1050 nm
    return logs, run_id


def test_sigma_a_and_sigma_e_within_4_sigma_noise_of_the_truth_at_each_wavelength(scan, capsys):
    logs, run_id = scan
    s = summary(logs, run_id, capsys)
    entries = [e for e in s["spectrum"] if not e["anchor"]]
    lam = sorted(e["wavelength_m"]["value"] for e in entries)
    # the default scan, less 1030 nm: the bench wavelength is an anchor (the bench file's values)
    expected = [x * 1e-9 for x in range(1010, 1051, 4) if x != 1030]
    assert lam == pytest.approx(expected, abs=1e-13)
    with_beta = 0
    for e in entries:
        truth = e["truth"]
        assert truth is not None, e
        for key in ("sigma_a_m2", "sigma_e_m2"):
            est, true = e[key], truth[key]["value"]
            assert est["sigma_noise"] > 0, (key, e)
            assert abs(est["value"] - true) < 4 * est["sigma_noise"], (key, e["wavelength_m"], est, true)
        beta = e["beta"]  # the pumped excited fraction at this wavelength, against the medium's
        # (its truth only from truth rows the poller caught settled in a pump-on half: a short
        # step may have none, and rows caught on a pump edge are not the pumped state)
        if "beta" in truth:
            with_beta += 1
            assert abs(beta["value"] - truth["beta"]["value"]) < 4 * beta["sigma_noise"], (
                e["wavelength_m"],
                beta,
                truth,
            )
        # a measurement, not a shrug: sigma_e known to better than 5 % of itself
        assert e["sigma_e_m2"]["sigma_noise"] < 0.05 * e["sigma_e_m2"]["value"], e
    assert with_beta >= len(entries) // 2, f"only {with_beta} of {len(entries)} steps have a settled truth"
    # the McCumber check ran against the bench file's zero line, and warned about the wings
    mc = s["spectrum_mccumber"]
    assert mc["far_from_zero_line_m"] and "amplifies" in mc["warning"]
    # the simulated sample obeys McCumber at the bench file's zero line (lineshape.py): consistent
    assert len(mc["z"]) == 10 and mc["max_abs_z"] < 4
    assert "mccumber_far_from_zero_line" in s["flags"]


def test_exported_spectrum_is_read_back_by_check(scan, capsys, tmp_path):
    logs, run_id = scan
    s = summary(logs, run_id, capsys)
    out = tmp_path / "measured.csv"
    assert main(["export", run_id, "--logs", str(logs), "--what", "spectrum", "--out", str(out)]) == 0
    text = builtin = Path(SPECTRUM_BENCH).read_text(encoding="utf-8")
    text, n = re.subn(r"\[sample\.cross_sections\]\n(?:[^\[\n][^\n]*\n)+", "", builtin)
    assert n == 1
    text = text.replace("refractive_index = 2.0\n", 'refractive_index = 2.0\nspectrum = "measured.csv"\n', 1)
    bench = tmp_path / "next.toml"
    bench.write_text(text, encoding="utf-8")
    capsys.readouterr()
    assert main(["check", str(bench)]) == 0, capsys.readouterr()
    cfg = load_bench(bench)
    # the next run's probe cross-sections are the measured ones at 1030 nm (the anchors' values,
    # the bench file's), its pump's the bench file's (written as the file's 940 nm row)
    first = load_bench(SPECTRUM_BENCH).sample.sigma
    assert cfg.sample.sigma.probe_emission == pytest.approx(first.probe_emission, rel=1e-6)
    assert cfg.sample.sigma.pump_absorption == pytest.approx(first.pump_absorption, rel=1e-6)
    # a measured row as written: read with numpy, independently of bench.physics.spectra
    lines = [ln for ln in out.read_text(encoding="utf-8").splitlines() if ln and not ln.startswith("#")]
    assert lines[0] == "wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]"
    table = np.array([[float(x) for x in ln.split(",")] for ln in lines[1:]])
    e = next(e for e in s["spectrum"] if abs(e["wavelength_m"]["value"] - 1018e-9) < 1e-13)
    row = table[np.argmin(abs(table[:, 0] - 1018))]
    assert row[1] * 1e-4 == pytest.approx(max(e["sigma_a_m2"]["value"], 0), rel=1e-5)
    assert row[2] * 1e-4 == pytest.approx(e["sigma_e_m2"]["value"], rel=1e-5)


def test_report_draws_the_cross_section_spectra(scan, tmp_path):
    logs, run_id = scan
    out = tmp_path / "report"
    with redirect_stdout(io.StringIO()):
        assert main(["report", run_id, "--logs", str(logs), "--out", str(out)]) == 0
    png = out / "fig-cross-sections-a1.png"
    assert png.is_file() and png.stat().st_size > 10_000
    assert "Cross-section spectra" in (out / "report.html").read_text(encoding="utf-8")


def test_replay_reproduces_the_stored_estimates(scan, capsys):
    logs, run_id = scan
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless"]) == 0
    out = capsys.readouterr().out
    assert "identical" in out, out


@pytest.mark.parametrize(
    "value, words",
    [
        ("1040nm:1080nm:5nm", "outside the tunable source's range"),
        ("1010nm:1050nm", "START:STOP:STEP"),
        ("1010nm:1050nm:fast", "fast"),
        ("1050nm:1010nm:2nm", "STOP must be longer"),
        ("1020nm,,1030nm", "empty item"),
        ("1020 kg", "1020 kg"),
    ],
)
def test_bad_wavelengths_are_named(value, words, tmp_path, capsys):
    code = main(
        [
            "record",
            "--config",
            SPECTRUM_BENCH,
            "--mode",
            "spectrum",
            "--wavelengths",
            value,
            "--logs",
            str(tmp_path),
            *ARM,
        ]
    )
    assert code == 2
    err = capsys.readouterr().err
    assert "--wavelengths" in err and words in err, err
    assert not list(tmp_path.glob("*.gbrun"))  # nothing recorded, nothing switched on


def test_wavelengths_belong_to_spectrum_mode_and_need_a_tunable_probe(tmp_path, capsys):
    assert main(["record", "--wavelengths", "1020nm,1030nm", "--logs", str(tmp_path), *ARM]) == 2
    assert "--wavelengths: applies to spectrum mode" in capsys.readouterr().err
    assert main(["record", "--mode", "spectrum", "--logs", str(tmp_path), *ARM]) == 2
    assert "instruments.wavelength" in capsys.readouterr().err
    assert not list(tmp_path.glob("*.gbrun"))
