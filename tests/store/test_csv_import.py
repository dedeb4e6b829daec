"""Importing a CSV file recorded elsewhere: the run holds the file's samples, and every bad
file gets an error naming the file, line and column, with no run file left behind.

References: the CSV layout of RFC 4180 (header line, comma-separated records; semicolon and
tab delimiters and a UTF-8 byte-order mark are common practice of instrument exports, no
source); pandas.read_csv as the independent reader of the same file.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from bench.config import load_bench
from bench.errors import ConfigError
from bench.store import RunReader
from bench.store.csv_import import import_csv

COLUMNS = {"time": "Time (s)", "probe": "CH1 (V)", "reference": "CH2 (V)", "pump_on": "TTL"}
DT = 2e-6


@pytest.fixture(scope="module")
def cfg():
    return load_bench()


def _scope_file(path, n=25_000, delimiter=",", preamble=True, t_start=-0.01, gap_at=None, gap=3, bom=False):
    rng = np.random.default_rng(3)
    idx = np.arange(n, dtype=float)
    if gap_at is not None:
        idx[gap_at:] += gap  # `gap` samples missing before row gap_at
    t = t_start + idx * DT
    probe = 0.8 + rng.normal(0, 1e-3, n)
    ref = 0.6 + rng.normal(0, 1e-3, n)
    ttl = np.where((idx // 5000) % 2 == 1, 4.9, 0.05)  # TTL levels, pump on in odd 10 ms halves
    lines = []
    if preamble:
        lines += ["Model,Scope-X", "Record Length,25000", ""]
    lines.append(delimiter.join(COLUMNS.values()))
    for row in zip(t, probe, ref, ttl, strict=True):
        lines.append(delimiter.join(repr(float(v)) for v in row))
    path.write_text(("\ufeff" if bom else "") + "\n".join(lines) + "\n\n", encoding="utf-8")
    return t, probe, ref, ttl


def test_import_holds_the_file_samples(tmp_path, cfg):
    csv = tmp_path / "scope.csv"
    t, probe, ref, ttl = _scope_file(csv)
    run = import_csv(csv, COLUMNS, cfg, tmp_path / "logs")
    assert run.parent == tmp_path / "logs" and run.suffix == ".gbrun"
    with RunReader(run) as r:
        assert r.status == "complete"
        assert r.meta["bench_text"] == cfg.text and r.meta["simulated"] is False
        assert r.meta["mode"] == "chopped" and r.meta["import"]["samples"] == 25_000
        blocks = list(r.iter_blocks())
    # a block also starts at the first pump-on sample (row 5000), so the baseline is taken before it
    assert [b.n for b in blocks] == [5_000, 10_000, 10_000]
    assert all(
        b.channels == ("probe", "reference", "pump_monitor") and b.source == "detector" for b in blocks
    )
    assert [b.first_index for b in blocks] == [0, 5_000, 15_000]
    data = np.vstack([b.data for b in blocks])
    # The same file read by pandas (independent reader) gives the same numbers.
    ref_frame = pd.read_csv(csv, skiprows=3)
    assert np.array_equal(data[:, 0], ref_frame["CH1 (V)"].to_numpy())
    assert np.array_equal(data[:, 1], ref_frame["CH2 (V)"].to_numpy())
    assert set(np.unique(data[:, 2])) == {0.0, 1.0}
    assert np.array_equal(data[:, 2], (ttl > 0.5).astype(float))
    times = np.concatenate([b.times() for b in blocks])
    assert blocks[0].dt == pytest.approx(DT, rel=1e-9)
    assert np.max(np.abs(times - (t - t[0]))) < 1e-3 * DT  # run clock starts at the first sample


def test_gaps_split_blocks_and_are_logged(tmp_path, cfg):
    csv = tmp_path / "gappy.csv"
    _scope_file(csv, n=15_000, gap_at=12_345, gap=3)
    run = import_csv(csv, COLUMNS, cfg, tmp_path)
    with RunReader(run) as r:
        blocks = list(r.iter_blocks())
        gaps = [e for e in r.events() if e.kind == "gap"]
        assert r.meta["import"]["missing_samples"] == 3
    assert [(b.first_index, b.n) for b in blocks] == [(0, 5_000), (5_000, 7_345), (12_348, 2_655)]
    assert len(gaps) == 1 and gaps[0].data["missing"] == 3
    # Header on line 4 after a 3-line preamble: data row k (from 0) is on line 5 + k.
    assert gaps[0].data["line"] == 5 + 12_345


def test_semicolons_bom_and_no_pump_column(tmp_path, cfg):
    csv = tmp_path / "semi.csv"
    _scope_file(csv, n=3000, delimiter=";", preamble=False, bom=True)
    cols = {k: v for k, v in COLUMNS.items() if k != "pump_on"}
    run = import_csv(csv, cols, cfg, tmp_path, block_size=1000)
    with RunReader(run) as r:
        blocks = list(r.iter_blocks())
        assert r.meta["mode"] == "watch"
    assert [b.n for b in blocks] == [1000] * 3 and blocks[0].channels == ("probe", "reference")


def _error(tmp_path, cfg, text, columns=COLUMNS) -> str:
    csv = tmp_path / "bad.csv"
    csv.write_text(text, encoding="utf-8")
    logs = tmp_path / "logs"
    with pytest.raises(ConfigError) as info:
        import_csv(csv, columns, cfg, logs)
    message = str(info.value)
    assert message.startswith(f"{csv}: ")
    assert not logs.exists() or not any(logs.iterdir()), "a failed import left a file"
    return message


HEADER = "Time (s),CH1 (V),CH2 (V),TTL\n"


def _rows(n, start=0, dt=DT):
    return "".join(f"{(start + i) * dt!r},0.8,0.6,0\n" for i in range(n))


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("", "is empty"),
        ("\n\n# only a comment\n", "is empty"),
        (HEADER, "has 0 data row(s) after the header (line 1)"),
        (HEADER + "0,0.8,0.6,0\n", "has 1 data row(s)"),
        ("Time (s),CH1 (V),TTL\n0,1,0\n", "no header line names the column(s) 'CH2 (V)'"),
        (HEADER + _rows(5) + "1e-5,0.8,abc,0\n", "line 7, column 'CH2 (V)': 'abc' is not a number"),
        (HEADER + _rows(5) + "1e-5,,0.6,0\n", "line 7, column 'CH1 (V)': is empty"),
        (HEADER + _rows(5) + "1e-5,nan,0.6,0\n", "line 7, column 'CH1 (V)': 'nan' is not a finite number"),
        (HEADER + _rows(5) + "1e-5,0.8\n", "line 7: has 2 fields, so no column 'CH2 (V)'"),
        (
            HEADER + _rows(5) + "4e-6,0.8,0.6,0\n",
            "line 7, column 'Time (s)': time 4e-06 is not after the previous",
        ),
        (HEADER + _rows(3000) + _rows(5, start=2999.5), "line 3002, column 'Time (s)': irregular sampling"),
    ],
)
def test_bad_files_name_line_and_column(tmp_path, cfg, text, expected):
    assert expected in _error(tmp_path, cfg, text)


def test_a_bad_line_far_into_the_file_removes_the_run(tmp_path, cfg):
    # The first 1001 rows are good, so a run file is made; line 20002 is bad.
    message = _error(tmp_path, cfg, HEADER + _rows(20_000) + "0.04,0.8,oops,0\n")
    assert "line 20002, column 'CH2 (V)': 'oops' is not a number" in message


def test_missing_file_directory_and_bad_arguments(tmp_path, cfg):
    with pytest.raises(ConfigError, match="no such CSV file"):
        import_csv(tmp_path / "none.csv", COLUMNS, cfg, tmp_path)
    with pytest.raises(ConfigError, match="is a directory"):
        import_csv(tmp_path, COLUMNS, cfg, tmp_path)
    with pytest.raises(ValueError, match="columns: needs the header name of reference"):
        import_csv(tmp_path / "x.csv", {"time": "t", "probe": "p"}, cfg, tmp_path)
    with pytest.raises(ValueError, match="columns: unknown key 'probe2'"):
        import_csv(tmp_path / "x.csv", {**COLUMNS, "probe2": "x"}, cfg, tmp_path)
    with pytest.raises(ValueError, match="mode"):
        import_csv(tmp_path / "x.csv", COLUMNS, cfg, tmp_path, mode="fast")


def test_not_utf8(tmp_path, cfg):
    csv = tmp_path / "latin.csv"
    csv.write_bytes(HEADER.encode() + b"0,0.8,0.6,0\n" + "1e-6,0.8,0.6,\u00e9\n".encode("latin-1"))
    with pytest.raises(ConfigError, match="is not UTF-8 text"):
        import_csv(csv, COLUMNS, cfg, tmp_path / "logs")


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="needs /dev/zero")
def test_import_of_dev_zero_is_refused_quickly_with_bounded_memory(tmp_path):
    """``/dev/zero`` is an endless line of NUL bytes: the import must stop at the first bounded
    read with an error, not read on until memory runs out. The child runs with its address
    space limited (RLIMIT_AS, 2 GB): reading the endless line whole would end in a
    MemoryError traceback there instead of the error and exit status 2."""
    resource = pytest.importorskip("resource")

    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_AS, (2 << 30, 2 << 30))

    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "bench",
            "import",
            "/dev/zero",
            "--logs",
            str(tmp_path / "logs"),
            "--columns",
            "time=t,probe=p,reference=r,pump_on=m",
        ],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
        preexec_fn=limit,
    )
    assert proc.returncode == 2, proc.stderr[-2000:]
    assert "/dev/zero: line 1 holds NUL characters: a binary file, not CSV text" in proc.stderr
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "logs").exists()


def test_an_overlong_line_is_refused_with_its_number(tmp_path, cfg):
    from bench.store.csv_import import MAX_LINE_CHARS

    message = _error(tmp_path, cfg, HEADER + _rows(3) + "1" * (MAX_LINE_CHARS + 10) + "\n")
    assert f"line 5 is longer than {MAX_LINE_CHARS} characters" in message
