"""A run whose last checkpoint ran out of space: the main file is short, the -wal file holds the data.

A child process records a run with a file-size limit (``RLIMIT_FSIZE``, with ``SIGXFSZ``
ignored, so a write past the limit fails with EFBIG as a write to a full disk fails with
ENOSPC: short, and SQLite reports it). Its blocks fit in the -wal file, but the checkpoint at
close, which copies them into the main file, is cut off at the limit. SQLite itself still
opens such a file: the pages missing from the main file are read from the -wal file (SQLite
WAL documentation, https://www.sqlite.org/wal.html; file format, section 4,
https://www.sqlite.org/fileformat2.html). The sqlite3 module is the outside reference here.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import sqlite3
import struct
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from bench.errors import RunStoreError
from bench.store import RunReader, list_runs, open_for_analysis

resource = pytest.importorskip("resource")  # POSIX only

LIMIT = 3_000_000  # bytes per file: above the -wal file's size, below the finished main file's

CHILD = textwrap.dedent(
    """
    import os, resource, signal, sys
    import numpy as np
    from bench.records import Block
    from bench.store import RunWriter

    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    w = RunWriter.create(sys.argv[1], bench_text="[bench]\\n", sample_id="full", flush_interval=0.05)
    # keep every new page in the -wal file until the close (no automatic checkpoint)
    w._conn.execute("PRAGMA wal_autocheckpoint = 0")

    def block(seq):
        data = np.random.default_rng(seq).normal(0.5, 0.01, size=(4000, 2))
        return Block("detector", seq, seq * 0.01, 1e-6, seq * 4000, ("probe", "reference"), data)

    for seq in range(20):
        w.append_block(block(seq))
    w.flush()
    w._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    resource.setrlimit(resource.RLIMIT_FSIZE, (int(sys.argv[2]), resource.RLIM_INFINITY))
    for seq in range(20, 60):
        w.append_block(block(seq))
    w.close()
    print(w.path, flush=True)
    """
)


def _expected(seq: int) -> np.ndarray:
    return np.random.default_rng(seq).normal(0.5, 0.01, size=(4000, 2))


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture
def cut_off(tmp_path) -> Path:
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    proc = subprocess.run(
        [sys.executable, "-c", CHILD, str(tmp_path), str(LIMIT)],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert proc.returncode == 0, proc.stderr
    path = Path(proc.stdout.strip().splitlines()[-1])
    head = path.read_bytes()[:100]
    page_size = struct.unpack(">H", head[16:18])[0]
    pages = struct.unpack(">I", head[28:32])[0]
    # the situation under test really arose: a short main file beside a -wal file
    assert path.stat().st_size < pages * page_size or path.stat().st_size % page_size
    assert Path(f"{path}-wal").stat().st_size > 0
    return path


def test_sqlite_and_gainbench_both_open_a_run_cut_off_by_a_full_disk(cut_off):
    with sqlite3.connect(f"{cut_off.resolve().as_uri()}?mode=ro", uri=True) as conn:  # the reference
        assert conn.execute("PRAGMA quick_check").fetchall() == [("ok",)]
        assert conn.execute("SELECT count(*) FROM blocks").fetchone() == (60,)
    before = _sha(cut_off)
    with RunReader(cut_off) as r:
        assert r.status == "complete"  # the stop time reached the -wal file
        seqs = []
        for b in r.iter_blocks():
            assert np.array_equal(b.data, _expected(b.seq)), b.seq
            seqs.append(b.seq)
        assert seqs == list(range(60))
    assert _sha(cut_off) == before  # reading did not write
    (row,) = list_runs(cut_off.parent)
    assert row["status"] == "complete" and row["error"] is None and row["blocks"] == 60
    assert row["size_bytes"] == cut_off.stat().st_size + Path(f"{cut_off}-wal").stat().st_size


def test_the_next_write_checkpoints_the_recovered_run_into_one_file(cut_off):
    with open_for_analysis(cut_off, "replay") as a:
        assert a.analysis_id == 2
    assert not Path(f"{cut_off}-wal").exists()
    data = cut_off.read_bytes()
    page_size, pages = struct.unpack(">H", data[16:18])[0], struct.unpack(">I", data[28:32])[0]
    assert len(data) == pages * page_size
    assert data[18:20] == b"\x01\x01"  # file format 1.3: back in rollback-journal (DELETE) mode
    with RunReader(cut_off) as r:
        r.integrity_check()
        assert r.block_count() == 60


def test_a_short_main_file_the_wal_does_not_cover_is_reported(cut_off, tmp_path):
    copy = tmp_path / "copy" / cut_off.name
    copy.parent.mkdir()
    shutil.copy(cut_off, copy)
    shutil.copy(f"{cut_off}-wal", f"{copy}-wal")
    page_size = struct.unpack(">H", copy.read_bytes()[16:18])[0]
    with open(copy, "r+b") as f:  # cut into the pages written before the -wal file's frames
        f.truncate(8 * page_size)
    with pytest.raises(RunStoreError, match="its -wal file does not hold the missing pages"):
        RunReader(copy)
