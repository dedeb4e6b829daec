"""Throughput and memory of the run store (slow; run with ``pytest -m slow -s`` to see figures).

Records the equivalent of 2 channels at 1 M samples/s (the acquisition rate the store must
sustain) as fast as it will go, and prints MB/s of sample data, the CPU time per second of
recorded data, and, for comparison, the disk's raw sequential write speed (os.write of 1 MiB
chunks, then fsync). Speed is only reported, never asserted. What is asserted: memory stays
flat (resident set size, via psutil, grows by less than 64 MB over the run after a warm-up;
the bound is common practice, no source: it is well under one minute of data).
"""

from __future__ import annotations

import os
import time

import numpy as np
import psutil
import pytest

from bench.records import Block
from bench.store import RunReader, RunWriter

RATE = 1_000_000  # samples/s per channel
BLOCK = 50_000  # samples per block
SECONDS = 30  # of recorded data per case


def _raw_disk_mb_per_s(directory, total_bytes: int) -> float:
    chunk = os.urandom(1 << 20)
    path = directory / "raw.bin"
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    start = time.perf_counter()
    try:
        for _ in range(total_bytes // len(chunk)):
            os.write(fd, chunk)
        os.fsync(fd)
    finally:
        os.close(fd)
    elapsed = time.perf_counter() - start
    path.unlink()
    return total_bytes / elapsed / 1e6


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["adc-codes-float32", "noise-float64"])
def test_sustains_two_channels_at_one_msps_with_flat_memory(tmp_path, kind):
    rng = np.random.default_rng(1)
    if kind == "adc-codes-float32":
        pool = [rng.integers(-32768, 32768, size=(BLOCK, 2)) * 2.0**-15 for _ in range(4)]
    else:
        pool = [rng.normal(0.5, 0.01, size=(BLOCK, 2)) for _ in range(4)]
    n_blocks = SECONDS * RATE // BLOCK
    proc = psutil.Process()
    w = RunWriter.create(tmp_path, bench_text="", sample_id="speed", flush_interval=0.5)
    rss_warm = None
    stored = 0
    wall0, cpu0 = time.perf_counter(), time.process_time()
    for seq in range(n_blocks):
        w.append_block(
            Block(
                "detector",
                seq,
                seq * BLOCK / RATE,
                1 / RATE,
                seq * BLOCK,
                ("probe", "reference"),
                pool[seq % len(pool)],
            )
        )
        w.flush_if_due()
        if seq == n_blocks // 6:
            rss_warm = proc.memory_info().rss
    w.close()
    wall, cpu = time.perf_counter() - wall0, time.process_time() - cpu0
    rss_end = proc.memory_info().rss
    with RunReader(w.path) as r:
        assert r.block_count() == n_blocks
        stored = sum(len(b.data) for b in r.iter_blocks(start=0.0, stop=0.2))
    assert stored == 0.2 * RATE
    size = w.path.stat().st_size
    raw = _raw_disk_mb_per_s(tmp_path, min(size, 512 << 20))
    data_mb = n_blocks * BLOCK * 2 * 8 / 1e6  # as float64 sample values
    print(
        f"\n{kind}: {data_mb / wall:.0f} MB/s of float64 sample values ({size / wall / 1e6:.0f} MB/s to the "
        f"file, {size / 1e6:.0f} MB); CPU {cpu / SECONDS * 100:.1f} % of one core per second of recorded data "
        f"(needed: {2 * 8 * RATE / 1e6:.0f} MB/s); raw disk {raw:.0f} MB/s; RSS growth after warm-up "
        f"{(rss_end - rss_warm) / 1e6:.1f} MB"
    )
    assert rss_end - rss_warm < 64e6
