"""The demo bench with a polled meter as its detector, through the command line with its
defaults: record, summary, replay, and the guard's stale-reading trip when the meter's replies
stop coming.

The outside reference is the simulated medium's own state (`summary --json` gives it beside
the estimates): on a simulated sample with no parameter error the estimate lies within
4 sigma_noise of it. The replay is checked against the stored live estimates (1e-9 relative).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_flags import ARM
from cli_runs import record_run
from cli_runs import summary_json as summary

from bench.cli import main
from bench.store import RunReader

METER_BENCH = str(Path(__file__).resolve().parents[2] / "bench" / "data" / "demo_meter_bench.toml")


def record(logs: Path, *extra: str) -> str:
    return record_run(logs, "--config", METER_BENCH, *extra)[0]


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    logs = tmp_path_factory.mktemp("meter-logs")
    return logs, record(logs, "--seconds", "6")


def test_record_stores_one_reading_per_block_at_its_own_time(recorded):
    logs, run_id = recorded
    with RunReader(logs / f"{run_id}.gbrun") as r:
        assert r.status == "complete"
        assert "QM-3" in json.dumps(r.meta.get("instruments"))
        blocks = list(r.iter_blocks(source="detector"))
    assert len(blocks) > 100  # 20 readings a second for 6 s and more
    assert all(b.n == 1 and b.dt == 0.0 for b in blocks)
    times = [b.t0 for b in blocks]
    assert all(b > a for a, b in zip(times, times[1:]))
    spacing = sorted(b - a for a, b in zip(times, times[1:]))
    assert 0.04 < spacing[len(spacing) // 2] < 0.06  # poll_rate = "20 Hz": 50 ms apart
    assert len(set(spacing)) > len(spacing) // 2  # real times, not a made-up grid
    assert [b.first_index for b in blocks] == list(range(len(blocks)))  # no reply lost


def test_beta_and_ln_ratio_within_4_sigma_noise_of_the_truth(recorded, capsys):
    logs, run_id = recorded
    s = summary(logs, run_id, capsys)
    assert s["status"] == "complete" and s["trips"] == []
    for name in ("ln_ratio", "beta"):
        est, truth = s["estimates"][name], s["truth"][name]["value"]
        assert est["sigma_noise"] > 0
        z = (est["value"] - truth) / est["sigma_noise"]
        assert abs(z) <= 4.0, (name, est, truth, z)


def test_replay_reproduces_the_stored_estimates(recorded, capsys):
    logs, run_id = recorded
    capsys.readouterr()
    assert main(["replay", run_id, "--logs", str(logs), "--headless", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["compared"] > 0
    assert out["max_relative_difference"] <= 1e-9


def test_export_gives_the_readings_times(recorded, tmp_path):
    logs, run_id = recorded
    path = tmp_path / "blocks.csv"
    code = main(
        [
            "export",
            run_id,
            "--logs",
            str(logs),
            "--what",
            "blocks",
            "--source",
            "detector",
            "--out",
            str(path),
        ]
    )
    assert code == 0
    header, *rows = path.read_text().splitlines()
    assert header.split(",")[:2] == ["time", "source"] and "read_spread" in header
    with RunReader(logs / f"{run_id}.gbrun") as r:
        t0s = [b.t0 for b in r.iter_blocks(source="detector")]
    assert [float(row.split(",")[0]) for row in rows] == pytest.approx(t0s, abs=1e-9)


def test_a_meter_bench_refuses_a_mode_that_needs_a_digitiser(tmp_path, capsys):
    code = main(["record", "--config", METER_BENCH, "--mode", "chopped", "--logs", str(tmp_path), *ARM])
    assert code == 2
    assert "polled meter" in capsys.readouterr().err


def test_meter_replies_lost_longer_than_stale_after_trip_the_guard(tmp_path, capsys):
    # every reply held back 3 s for 2 s of the run (the meter's timeout is 1 s): no reading
    # for longer than guard.stale_after (1 s here, set after ARM's 2 s)
    run_id = record(
        tmp_path, "--seconds", "6", "--fault", "slow:detector@4s+2s", "--set", "guard.stale_after=1s"
    )
    s = summary(tmp_path, run_id, capsys)
    stale = [t for t in s["trips"] if t["condition"] == "stale.detector"]
    assert stale, s["trips"]
    assert "no fresh detector reading" in stale[0]["reason"]


def test_an_interlock_fault_trips_the_guard_within_a_pump_poll_of_the_fault(tmp_path, capsys):
    """The interlock is read from the pump driver, polled every 20 ms beside the meter's 20
    readings a second; the guard must see the fault at the next pump poll and have the off
    command done within 100 ms of that reading (this project's bound, common practice for a
    software layer, no source; the hardware interlock itself acts at once and is not replaced).
    The fault is injected at 3 s of the simulator's clock; the run clock's offset from it comes
    from the truth rows, which carry both clocks."""
    import statistics

    run_id = record(tmp_path, "--seconds", "6", "--fault", "interlock@3s+1s")
    s = summary(tmp_path, run_id, capsys)
    trips = [t for t in s["trips"] if t["condition"] == "interlock_open"]
    assert trips, s["trips"]
    trip = trips[0]
    assert 0 <= trip["latency_s"] <= 0.100, trip
    with RunReader(tmp_path / f"{run_id}.gbrun") as r:
        offset = statistics.median(row["t"] - row["sim_t"] for row in r.truth())
    seen_after_fault = trip["seen_at"] - (3.0 + offset)
    # one pump poll (20 ms), the pump's reply and the truth clock's own reading error (~10 ms)
    assert -0.015 <= seen_after_fault <= 0.060, (seen_after_fault, trip)
    print(
        f"interlock fault seen {seen_after_fault * 1e3:.1f} ms after it, off {trip['latency_s'] * 1e3:.1f} ms later"
    )
