"""`gainbench benchmark`: what it measures is measured, and said with its reference. No speed is
asserted here (figures depend on the machine); the short end-to-end run is marked slow."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from bench.performance import highest_rate, replay_speed


def test_highest_rate_stops_at_the_first_rate_that_does_not_keep_up(tmp_path):
    seen = []

    def fake(rate, seconds, log_dir):
        seen.append(rate)
        return {
            "rate_hz": rate,
            "samples_per_s": rate,
            "drops": 0 if rate < 3 else 5,
            "lost": 0,
            "lag_s": 0.0,
            "tripped": False,
            "trip_reason": None,
            "kept_up": rate < 3,
        }

    best, runs = highest_rate(tmp_path, [1, 2, 3, 4], 1.0, lambda text: None, run=fake)
    assert best == 2 and seen == [1, 2, 3] and len(runs) == 3


def test_replay_speed_counts_samples_of_every_channel(tmp_path):
    from cli_flags import ARM

    from bench.cli import main

    assert main(["record", "--seconds", "0.5", "--quiet", "--logs", str(tmp_path), *ARM]) == 0
    (path,) = tmp_path.glob("*.gbrun")
    r = replay_speed(str(path))
    assert r["channels"] == 3  # probe, reference, pump monitor on the demo bench
    assert r["samples_per_s"] == pytest.approx(3 * r["sets_per_s"])
    assert r["identical"] is True  # the replay reproduced the stored estimates exactly


@pytest.mark.slow
def test_quick_benchmark_prints_every_figure_as_json(tmp_path):
    cli = "import sys; from bench.cli import main; sys.exit(main(sys.argv[1:]))"
    out = subprocess.run(
        [sys.executable, "-c", cli, "benchmark", "--quick", "--json", "--logs", str(tmp_path)],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert out.returncode == 0, out.stderr[-2000:]
    figures = {f["name"]: f for f in json.loads(out.stdout)}
    for name in (
        "disk sequential write",
        "run store write",
        "highest rate, zero drops, headless",
        "highest rate, zero drops, dashboard open",
        "reading to screen, 95th percentile",
        "estimator cost, watch",
        "replay speed",
        "guard trip latency (worst)",
        "memory after 1 simulated hour",
        "memory after 3 simulated hours",
    ):
        assert name in figures, name
        assert figures[name]["reference"], name
    assert figures["replay speed"]["extra"]["identical"] is True
    assert list(tmp_path.iterdir()) == []  # the benchmark's runs are deleted afterwards
