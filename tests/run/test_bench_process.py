"""The bench in a process of its own (`bench.run.measurement_process.RemoteMeasurement`), as
`gainbench live` runs it: the same procedures as in one process, errors passed on with their
type and text, and the pump switched off by the bench process itself when the dashboard's
process dies (a real ``kill -9``) (common practice for control software, no source)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from bench.config import load_bench
from bench.run.measurement_process import BenchProcessError, RemoteMeasurement
from bench.run.pump_program import default_current
from bench.safety.checklist_answers import answers_from_flags
from bench.safety.guard import GuardRefused
from bench.store import RunReader

ODS = {940e-9: 5.0, 1030e-9: 2.0}
#: not a staleness test: a loaded test machine may stall a reader for longer than 0.5 s
OVERRIDES = {"guard.stale_after": "3 s"}


def remote(log_dir) -> RemoteMeasurement:
    cfg = load_bench(overrides=OVERRIDES)
    current = default_current(cfg)
    return RemoteMeasurement(
        cfg,
        settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)},
        log_dir=log_dir,
        seed=5,
        operator="tester",
    )


def wait_for(condition, what: str, timeout: float = 30.0) -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        time.sleep(0.05)


def test_procedures_run_in_the_bench_process_and_the_run_closes_complete(tmp_path):
    with remote(tmp_path) as m:
        wait_for(lambda: m.snapshot(with_history=False).blocks > 5, "the first blocks")
        m.capture_dark(0.05)
        m.capture_baseline(0.1)
        with pytest.raises(GuardRefused, match="armed"):  # the guard's refusal, with its type and text
            m.emit("tester")
        with pytest.raises(BenchProcessError, match="not a method"):
            m._request("close_shutter", "pump")
        result = m.arm(answers_from_flags("tester", ODS, True), "tester")
        assert result.passed, result.refusals
        m.emit("tester")
        wait_for(lambda: m.snapshot(with_history=False).pump.get("pump_on", 0) > 0.5, "the pump output on")
        snap = m.snapshot()
        assert snap.guard_state == "emitting" and m.guarded_pump.state == "emitting"
        assert snap.has_dark and snap.has_baseline
        assert set(snap.levels) == {"probe", "reference", "transmission"}
        assert snap.trace is not None and snap.trace.t.size > 0  # the history crosses the pipe too
        m.note("crossed the pipe")
        path = m.run_path
    with RunReader(path) as r:
        assert r.status == "complete"
        r.integrity_check()
        events = r.events()
        assert any(e.kind == "note" and e.text == "crossed the pipe" for e in events)
        (down,) = [e for e in events if e.kind == "guard" and "shutdown" in e.text]
        assert down.data["pump_off_ok"] is True  # the off command sent and the output read back off


CHILD = textwrap.dedent("""
    import sys, time
    from bench.safety.checklist_answers import answers_from_flags
    from bench.config import load_bench
    from bench.run.measurement_process import RemoteMeasurement
    from bench.run.pump_program import default_current

    def main():
        cfg = load_bench(overrides={"guard.stale_after": "3 s"})
        current = default_current(cfg)
        m = RemoteMeasurement(cfg, settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)},
                              log_dir=sys.argv[1])
        m.open()
        m.capture_baseline(0.1)
        m.arm(answers_from_flags("tester", {940e-9: 5.0, 1030e-9: 2.0}, True), "tester")
        m.emit("tester")
        while m.snapshot(with_history=False).pump.get("pump_on", 0) < 0.5:
            time.sleep(0.05)
        print(m.run_path, m._process.pid, "EMITTING", flush=True)
        time.sleep(600)

    if __name__ == "__main__":
        main()
""")


def test_the_bench_process_switches_the_pump_off_when_the_dashboard_process_is_killed(tmp_path):
    script = tmp_path / "dashboard_stand_in.py"
    script.write_text(CHILD)
    proc = subprocess.Popen([sys.executable, str(script), str(tmp_path)], stdout=subprocess.PIPE, text=True)
    try:
        line = proc.stdout.readline()
        assert line.strip().endswith("EMITTING"), line
        run_path, bench_pid, _ = line.split()
        os.kill(proc.pid, signal.SIGKILL)  # the dashboard's process dies: no cleanup runs in it
        proc.wait(10)

        def closed() -> bool:
            with RunReader(run_path) as r:
                return r.status == "complete"

        wait_for(closed, "the bench process to close the run", timeout=60)
        with RunReader(run_path) as r:
            r.integrity_check()
            events = r.events()
            (down,) = [e for e in events if e.kind == "guard" and "the dashboard process ended" in e.text]
            assert down.data["pump_off_ok"] is True  # sent, and the output read back off
            assert "the dashboard process ended" in r.meta.get("stop_reason", "")
        wait_for(lambda: not _alive(int(bench_pid)), "the bench process to end")
    finally:
        if proc.poll() is None:
            proc.kill()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    with open(f"/proc/{pid}/stat") as f:  # a zombie has ended; it only waits for its parent
        return f.read().split(")")[-1].split()[0] != "Z"


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_a_dead_bench_process_is_reported_on_every_call(tmp_path):
    m = remote(tmp_path)
    m.open()
    try:
        m._process.kill()
        m._process.join(10)
        wait_for(lambda: m._gone is not None, "the dashboard side to notice")
        with pytest.raises(BenchProcessError, match="switch it off at the driver"):
            m.snapshot()
        with pytest.raises(BenchProcessError, match="ended unexpectedly"):
            m.stop_emission()
    finally:
        m.close()  # harmless on a dead bench process


@pytest.mark.parametrize("sig", ["SIGHUP", "SIGTERM"])
def test_the_bench_process_survives_a_hangup_and_closes_cleanly_on_sigterm(tmp_path, sig):
    # A closed terminal sends SIGHUP to the whole process group: the bench process must not die
    # with the pump on (the dashboard's end closes it). SIGTERM closes it as a quit does.
    m = remote(tmp_path)
    m.open()
    try:
        result = m.arm(answers_from_flags("tester", ODS, True), "tester")
        assert result.passed
        m.emit("tester")
        os.kill(m._process.pid, getattr(signal, sig))
        if sig == "SIGHUP":
            m._process.join(0.5)  # a default SIGHUP would have ended it by now: it must not
            assert m.alive
            assert m.snapshot(with_history=False).guard_state == "emitting"
            m.close()
        else:
            m._process.join(60)
            assert m._process.exitcode == 0
        with RunReader(m.run_path) as r:
            assert r.status == "complete"
            (down,) = [e for e in r.events() if e.kind == "guard" and "shutdown" in e.text]
            assert down.data["pump_off_ok"] is True
            if sig == "SIGTERM":
                assert "SIGTERM" in r.meta.get("stop_reason", "")
    finally:
        m.close()
