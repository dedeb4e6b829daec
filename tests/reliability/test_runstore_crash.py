"""A recording killed with SIGKILL loses at most its last flush interval and still opens.

A child process records blocks as fast as it can with a short flush interval and prints the
last block of each commit. While it runs, a reader in this process opens the run (WAL mode:
reading while another process writes) and finds every reported block. Then the child is
killed with SIGKILL (POSIX: it cannot be caught, so no cleanup runs), and the file must pass
SQLite's ``PRAGMA integrity_check`` and hold every block up to the last reported commit,
bit for bit, without gaps. That committed data survives a killed process is SQLite's
documented WAL guarantee (https://www.sqlite.org/wal.html); this checks our use of it.
"""

from __future__ import annotations

import hashlib
import os
import queue
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from bench.records import Estimate, Quantity
from bench.store import RunReader, open_for_analysis

CHILD = textwrap.dedent(
    """
    import sys, time
    import numpy as np
    from bench.records import Block
    from bench.store import RunWriter

    def data(seq):
        rng = np.random.default_rng(seq)
        if seq % 3 == 0:  # ADC codes: stored as float32
            return rng.integers(-32768, 32768, size=(10000, 2)) * 2.0**-15
        return rng.normal(0.5, 0.01, size=(10000, 2))

    w = RunWriter.create(sys.argv[1], bench_text="[bench]\\n", sample_id="killed", flush_interval=0.05)
    print("path", w.path, flush=True)
    flushes = 0
    deadline = time.monotonic() + 60.0  # bounded even if the parent never kills it
    seq = 0
    while time.monotonic() < deadline:
        w.append_block(Block("detector", seq, seq * 0.01, 1e-6, seq * 10000, ("probe", "reference"), data(seq)))
        if w.flush_count != flushes:
            flushes = w.flush_count
            print("flushed", seq, flush=True)
        seq += 1
    """
)


def _expected(seq: int) -> np.ndarray:
    rng = np.random.default_rng(seq)
    if seq % 3 == 0:
        return rng.integers(-32768, 32768, size=(10000, 2)) * 2.0**-15
    return rng.normal(0.5, 0.01, size=(10000, 2))


def _lines(stream, out: queue.Queue) -> None:
    for line in stream:
        out.put(line.strip())
    out.put(None)


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="SIGKILL is POSIX only")
def test_kill_9_loses_at_most_the_last_flush_and_the_file_opens(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    proc = subprocess.Popen(
        [sys.executable, "-c", CHILD, str(tmp_path)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )
    lines: queue.Queue = queue.Queue()
    threading.Thread(target=_lines, args=(proc.stdout, lines), daemon=True).start()
    deadline = time.monotonic() + 60.0
    path, flushed, checked_live = None, [], False
    try:
        while len(flushed) < 8:
            line = lines.get(timeout=max(0.1, deadline - time.monotonic()))
            assert line is not None, f"child ended early: {proc.stderr.read()}"
            kind, _, value = line.partition(" ")
            if kind == "path":
                path = Path(value)
            elif kind == "flushed":
                flushed.append(int(value))
                if len(flushed) == 3 and not checked_live:
                    with RunReader(path) as live:  # the child is still writing
                        assert live.status == "incomplete"
                        seqs = [b.seq for b in live.iter_blocks()]
                        assert seqs[: flushed[-1] + 1] == list(range(flushed[-1] + 1))
                    checked_live = True
            assert time.monotonic() < deadline, "child too slow"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    assert checked_live
    last = flushed[-1]
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    with RunReader(path) as r:
        r.integrity_check()
        assert r.status == "incomplete" and r.meta["stop_time"] is None
        seqs = []
        for block in r.iter_blocks():
            seqs.append(block.seq)
            if block.seq <= last:
                assert np.array_equal(block.data, _expected(block.seq)), f"block {block.seq} differs"
        assert seqs == list(range(len(seqs)))  # no holes
        assert len(seqs) >= last + 1  # nothing committed was lost
        assert r.summary()["status"] == "incomplete"
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before  # reading did not write

    # A re-analysis is the only write to an existing run; it also merges the cut-off run's
    # -wal file, so the run becomes one self-contained file with every block in it.
    with open_for_analysis(path, "reanalysis") as a:
        a.append_estimates(Estimate(0.0, "watch", "cumulative", {"beta": Quantity(0.3, 0.01)}))
    assert not Path(f"{path}-wal").exists()
    assert path.read_bytes()[18:20] == b"\x01\x01"  # SQLite file format 1.3: rollback journal mode
    with RunReader(path) as r:
        r.integrity_check()
        assert r.block_count() == len(seqs) and r.status == "incomplete"
        assert [a["kind"] for a in r.analyses()] == ["live", "reanalysis"]
