"""Closing a run whose analysis has fallen behind: every block read still lands in the run file
(stored without being analysed, and said so in an event), and replay analyses the rest.

The slow analysis is made on purpose (the estimator is slowed down in this test); the bench is
the simulated one, through its real transports."""

from __future__ import annotations

import time

import pytest

import bench.run.consumer as pipeline
import bench.run.measurement as measurement
from bench.config import load_bench, load_bench_text
from bench.run.measurement import Measurement
from bench.run.pump_program import default_current
from bench.run.replay import replay
from bench.safety.checklist_answers import answers_from_flags
from bench.store import RunReader

ODS = {940e-9: 5.0, 1030e-9: 2.0}


@pytest.fixture
def slow_analysis(monkeypatch):
    real = pipeline.est.update

    def slow(state, block):
        if block.source == "detector":
            # twice as long as the block's own data: the analysis falls behind by half the
            # stream, whatever the block size, and the queue (256 blocks) does not fill
            time.sleep(2.0 * block.n * block.dt)
        return real(state, block)

    monkeypatch.setattr(pipeline.est, "update", slow)
    monkeypatch.setattr(measurement, "CLOSE_ANALYSE_S", 0.2)


def test_a_late_close_stores_every_block_read_and_replay_analyses_them(slow_analysis, tmp_path):
    base = load_bench()  # a loaded test machine may stall a reader: not a staleness test
    cfg = load_bench_text(base.text, base.source, overrides={"guard.stale_after": "2 s"})
    current = default_current(cfg)
    m = Measurement(
        cfg, settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)}, log_dir=tmp_path
    )
    with m:
        m.capture_baseline(0.05)
        m.arm(answers_from_flags("tester", ODS, True), "tester")
        m.emit("tester")
        m.hold(0.6)
        backlog = m.data_q.qsize()
        path = m.run_path
    assert backlog > 10, "the test needs a backlog at close"
    with RunReader(path) as r:
        r.integrity_check()
        notes = [e for e in r.events() if e.kind == "run" and e.data.get("unanalysed_blocks")]
        assert len(notes) == 1
        assert "replay analyses them" in notes[0].text
        stored = r.block_count("detector")
        gaps = [e for e in r.events() if e.kind == "gap"]
        drops = [e for e in r.events() if e.kind == "drop"]
        live = len(r.estimates())
    assert not gaps and not drops  # nothing read was lost
    assert stored >= notes[0].data["unanalysed_blocks"] + 1
    result = replay(path)
    assert len(result.estimates) > live  # the unanalysed tail has estimates after replay
    assert result.max_relative_difference == 0.0  # and the analysed part is reproduced exactly
