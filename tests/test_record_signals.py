"""What happens to a recording when its process is interrupted or killed.

- Ctrl-C (SIGINT) to `gainbench record` leaves the pump output off: checked on the simulated
  pump driver itself, served by a separate `gainbench sim serve` process and queried with a
  plain pyvisa session (not our driver).
- `kill -9` of `gainbench record` loses at most the last flush interval: the run file opens
  afterwards, passes PRAGMA integrity_check and holds data up to shortly before the kill.
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from bench.config import builtin_bench_path
from bench.runstore import RunReader
from cli_flags import ARM



def _gainbench(*args: str) -> list[str]:
    return [sys.executable, "-m", "bench", *args]


def _read_until(proc: subprocess.Popen, pattern: str, timeout: float) -> list[str]:
    """Lines of stdout up to and including the first matching ``pattern``."""
    lines: list[str] = []
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            if proc.poll() is not None:
                break
            continue
        lines.append(line.rstrip("\n"))
        if re.search(pattern, line):
            return lines
    raise AssertionError(f"no line matching {pattern!r} within {timeout} s; got {lines!r}; "
                         f"stderr: {proc.stderr.read() if proc.poll() is not None else ''}")


@pytest.fixture
def external_sim(tmp_path):
    """`gainbench sim serve` in its own process, and a bench file that points at it."""
    proc = subprocess.Popen(_gainbench("sim", "serve"), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        resources = {}
        deadline = time.monotonic() + 30
        while len(resources) < 3 and time.monotonic() < deadline:
            line = proc.stdout.readline()
            parts = line.split()
            if len(parts) == 2:
                resources[parts[0]] = parts[1]
        assert {"detector", "pump", "shutter"} <= set(resources), resources
        text = builtin_bench_path().read_text(encoding="utf-8")
        text = text.replace("simulated = true", "simulated = false")
        for role in ("detector", "pump", "shutter"):
            head = f"[instruments.{role}]"
            start = text.index(head)
            stop = text.index('resource = "simulated"', start)
            text = text[:stop] + f'resource = "{resources[role]}"' + text[stop + len('resource = "simulated"'):]
        bench = tmp_path / "external.toml"
        bench.write_text(text, encoding="utf-8")
        yield bench, resources
    finally:
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()


def _pump_output(resource: str) -> str:
    import pyvisa

    rm = pyvisa.ResourceManager("@py")
    inst = rm.open_resource(resource, read_termination="\n", write_termination="\n", timeout=3000)
    try:
        return inst.query("OUTP?").strip()
    finally:
        inst.close()
        rm.close()


@pytest.mark.parametrize(("sig", "status"), [(signal.SIGINT, 130), (signal.SIGTERM, 143), (signal.SIGHUP, 129)])
def test_ctrl_c_or_termination_leaves_the_pump_off(external_sim, tmp_path, sig, status):
    # Ctrl-C, `kill PID` (SIGTERM) and a closed terminal (SIGHUP) all end the run as a quit does
    bench, resources = external_sim
    logs = tmp_path / "logs"
    proc = subprocess.Popen(
        _gainbench("record", "--config", str(bench), "--seconds", "60", "--logs", str(logs), *ARM),
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        _read_until(proc, r"guard emitting", timeout=60)
        assert _pump_output(resources["pump"]) == "1"  # the pump really is on
        proc.send_signal(sig)
        proc.wait(30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == status
    assert _pump_output(resources["pump"]) == "0"  # and now really off
    (run_file,) = logs.glob("*.gbrun")
    with RunReader(run_file) as r:
        assert r.status == "complete"
        texts = [e.text for e in r.events() if e.kind == "guard"]
        said = "interrupted" if sig == signal.SIGINT else f"terminated ({signal.Signals(sig).name})"
        assert any("-> safe" in t and said in t for t in texts), texts


def test_kill_9_loses_at_most_the_last_flush_interval(tmp_path):
    logs = tmp_path / "logs"
    proc = subprocess.Popen(
        _gainbench("record", "--seconds", "60", "--logs", str(logs), *ARM),
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        lines = _read_until(proc, r"guard emitting", timeout=60)
        lines += _read_until(proc, r"guard emitting", timeout=30)
        t_seen = float(re.search(r"t\s+([\d.]+) s", lines[-1]).group(1))
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    (run_file,) = logs.glob("*.gbrun")
    with RunReader(run_file) as r:
        r.integrity_check()
        assert r.status == "incomplete"
        newest = max(b.t_end for b in r.iter_blocks(source="detector"))
    flush = 0.5  # the built-in bench's run.flush_interval
    # The status line was printed after data up to t_seen had been processed and stored; at most
    # one flush interval of it may be lost (plus one status period of slack).
    assert newest >= t_seen - flush - 1.0


def test_simulator_stops_when_its_parent_is_killed(tmp_path):
    """The simulated bench started by `record` must not outlive a killed `record`."""
    import psutil

    logs = tmp_path / "logs"
    proc = subprocess.Popen(
        _gainbench("record", "--seconds", "60", "--logs", str(logs), *ARM),
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    try:
        _read_until(proc, r"guard emitting", timeout=60)
        children = psutil.Process(proc.pid).children(recursive=True)
        assert children, "record started no simulator process"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    gone, alive = psutil.wait_procs(children, timeout=15)
    for p in alive:
        p.kill()
    assert not alive, f"simulator processes left running: {alive}"
