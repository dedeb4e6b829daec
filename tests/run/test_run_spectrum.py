"""A run keeps its cross-section spectrum: replay does not depend on the CSV file afterwards, and
a relative spectrum path in a bench file is relative to that file's folder.

The run is recorded on the simulated bench through `gainbench record`, from a working directory
that is not the bench file's folder. The reference for "the same estimates" is the run's own
live analysis (replay against the stored estimates); the reference for the cross-sections is
the spectrum file as written here, read with numpy's interpolation (np.interp) at the probe and
pump wavelengths, independently of `bench.physics.spectra`.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import re
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest
from cli_flags import ARM

from bench.cli import main
from bench.config import builtin_bench_path, load_bench
from bench.run.replay import replay, run_config
from bench.store import RunReader, RunWriter

# INVENTED spectrum, magnitudes of a Yb-doped crystal (as the demo bench); not a measurement.
SPECTRUM = """# invented test spectrum
wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]
930,0.90e-20,0.12e-20
950,1.10e-20,0.18e-20
1020,0.20e-20,1.60e-20
1040,0.06e-20,2.60e-20
"""


def _bench_text() -> str:
    text = builtin_bench_path().read_text(encoding="utf-8")
    text, n = re.subn(r"\[sample\.cross_sections\]\n(?:[^\[\n][^\n]*\n)+", "", text)
    assert n == 1
    return text.replace("refractive_index = 2.0", 'refractive_index = 2.0\nspectrum = "spectra/xs.csv"')


def _expected_sigma() -> dict[str, float]:
    rows = np.array([[float(x) for x in line.split(",")] for line in SPECTRUM.splitlines()[2:]])
    lam, sa, se = rows[:, 0], rows[:, 1] * 1e-4, rows[:, 2] * 1e-4  # nm, cm^2 -> m^2
    return {
        "probe_emission": float(np.interp(1030, lam, se)),
        "probe_absorption": float(np.interp(1030, lam, sa)),
        "pump_absorption": float(np.interp(940, lam, sa)),
        "pump_emission": float(np.interp(940, lam, se)),
    }


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    root = tmp_path_factory.mktemp("spectrum")
    (root / "bench" / "spectra").mkdir(parents=True)
    (root / "bench" / "spectra" / "xs.csv").write_text(SPECTRUM, encoding="utf-8")
    (root / "bench" / "bench.toml").write_text(_bench_text(), encoding="utf-8")
    (root / "work").mkdir()
    here = os.getcwd()
    os.chdir(root / "work")  # not the bench file's folder
    try:
        buf = io.StringIO()
        with redirect_stdout(buf):
            code = main(
                [
                    "record",
                    "--config",
                    str(Path("..") / "bench" / "bench.toml"),
                    "--seconds",
                    "1",
                    "--quiet",
                    "--logs",
                    "logs",
                    *ARM,
                ]
            )
    finally:
        os.chdir(here)
    assert code == 0, buf.getvalue()
    run_id = buf.getvalue().strip().splitlines()[-1]
    return root, root / "work" / "logs" / f"{run_id}.gbrun"


def test_a_relative_spectrum_path_is_relative_to_the_bench_file(recorded, tmp_path, monkeypatch):
    root, _ = recorded
    monkeypatch.chdir(tmp_path)  # a folder with no spectra/ in it
    cfg = load_bench(root / "bench" / "bench.toml")
    for key, value in _expected_sigma().items():
        assert getattr(cfg.sample.sigma, key) == pytest.approx(value, rel=1e-12), key


def test_the_run_holds_the_spectrum_with_its_checksum(recorded):
    _, path = recorded
    with RunReader(path) as r:
        stored = r.meta["spectrum"]
        assert r.status == "complete" and len(r.estimates()) > 0
    assert stored["source_name"] == "xs.csv"
    assert stored["sha256"] == hashlib.sha256(SPECTRUM.encode()).hexdigest()  # hashlib, the reference
    assert stored["text"] == SPECTRUM and stored["derived"] is None
    assert stored["wavelength_m"] == pytest.approx([930e-9, 950e-9, 1020e-9, 1040e-9], rel=1e-15)
    assert stored["sigma_e_m2"][-1] == pytest.approx(2.60e-24, rel=1e-15)


@pytest.mark.parametrize("change", ["edited", "deleted"])
def test_replay_gives_the_same_estimates_after_the_spectrum_file_changed(recorded, change, capsys):
    root, path = recorded
    csv = root / "bench" / "spectra" / "xs.csv"
    if change == "edited":
        csv.write_text(
            SPECTRUM.replace("2.60e-20", "5.00e-20").replace("1.60e-20", "0.40e-20"), encoding="utf-8"
        )
    else:
        csv.unlink(missing_ok=True)
    try:
        result = replay(path)
        assert result.compared > 0 and result.max_relative_difference == 0.0
        with RunReader(path) as r:
            cfg = run_config(r)
        for key, value in _expected_sigma().items():
            assert getattr(cfg.sample.sigma, key) == pytest.approx(value, rel=1e-12), key
        assert main(["summary", str(path), "--json"]) == 0
        summary = json.loads(capsys.readouterr().out)
        with RunReader(path) as r:
            live = r.final_estimate()
        assert summary["estimates"]["beta"]["value"] == live.values["beta"].value
    finally:
        csv.write_text(SPECTRUM, encoding="utf-8")


def test_a_run_without_a_stored_spectrum_still_reads_the_file(recorded, tmp_path):
    root, _ = recorded
    cfg = load_bench(root / "bench" / "bench.toml")
    w = RunWriter.create(
        tmp_path, bench_text=cfg.text, bench_source=cfg.source, meta={"bench_overrides": dict(cfg.overrides)}
    )  # as an older gainbench wrote it
    w.close()
    with RunReader(w.path) as r:
        assert "spectrum" not in r.meta
        old = run_config(r)
    assert old.sample.sigma == cfg.sample.sigma


def test_a_damaged_stored_spectrum_is_named(recorded, tmp_path):
    from bench.errors import RunStoreError

    root, path = recorded
    cfg = load_bench(root / "bench" / "bench.toml")
    with RunReader(path) as r:
        stored = dict(r.meta["spectrum"])
    stored["text"] = stored["text"].replace("2.60e-20", "2.70e-20")  # no longer the checksummed text
    w = RunWriter.create(tmp_path, bench_text=cfg.text, meta={"spectrum": stored})
    w.close()
    with RunReader(w.path) as r, pytest.raises(RunStoreError, match="does not match its checksum"):
        run_config(r)


def test_a_derived_column_is_derived_again_only_for_a_corrected_temperature(tmp_path):
    from bench import physics
    from bench.physics import spectra

    source = Path(__file__).parents[1] / "data" / "spectra" / "absorption_only.csv"
    eps = float(physics.photon_energy(975e-9))
    stored = spectra.StoredSpectrum.from_stored(
        spectra.stored_form(source, epsilon=eps, temperature=295.0), "run"
    )
    assert stored.spectrum(eps, 295.0) is stored.table  # as recorded: the stored table itself
    direct = spectra.load_spectrum(source, epsilon=eps, temperature=300.0)
    again = stored.spectrum(eps, 300.0)  # a re-analysis with sample.temperature corrected
    np.testing.assert_array_equal(again.sigma_e, direct.sigma_e)
    assert not np.array_equal(again.sigma_e, stored.table.sigma_e)


def test_the_text_and_overrides_alone_find_the_spectrum_from_another_folder(recorded, tmp_path, monkeypatch):
    """What the bench process and the simulated bench do: read the bench file's text (written
    elsewhere or passed on) with the overrides, in a working directory of their own."""
    from bench.config import load_bench_text

    root, _ = recorded
    cfg = load_bench(root / "bench" / "bench.toml")
    monkeypatch.chdir(tmp_path)
    (tmp_path / "copy.toml").write_text(cfg.text, encoding="utf-8")
    again = load_bench_text(
        cfg.text, str(tmp_path / "copy.toml"), overrides=dict(cfg.overrides), base_dir=tmp_path
    )
    assert again.sample.sigma == cfg.sample.sigma


def test_a_spectrum_changed_between_reading_the_bench_and_recording_is_refused(recorded, tmp_path):
    from bench.errors import ConfigError

    root, _ = recorded
    csv = root / "bench" / "spectra" / "xs.csv"
    cfg = load_bench(root / "bench" / "bench.toml")
    csv.write_text(SPECTRUM.replace("2.60e-20", "2.90e-20"), encoding="utf-8")
    try:
        with pytest.raises(ConfigError, match="the spectrum file changed after"):
            RunWriter.from_config(cfg, log_dir=tmp_path)
    finally:
        csv.write_text(SPECTRUM, encoding="utf-8")
    assert not any(tmp_path.iterdir())
