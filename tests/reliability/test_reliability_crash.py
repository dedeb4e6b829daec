"""Crash test: `gainbench record` killed with SIGKILL at random moments.

Each kill lands at a moment drawn from a seeded generator: while the tool starts (the
simulated bench's process may not be up yet), after the run file is made but before the pump
is on (dark, baseline, checklist), or while the pump emits. SIGKILL cannot be caught (POSIX),
so no cleanup of the tool runs. After each kill:

- the run file, if the tool got as far as making one, opens, passes SQLite's ``PRAGMA
  integrity_check``, is marked incomplete, and reading it changes none of its bytes;
- it holds detector data up to the last status line printed before the kill, less one flush
  interval (the committed data; SQLite's WAL guarantee, https://www.sqlite.org/wal.html) and
  one second of slack (a status line is printed once a second);
- no process the tool started (the simulated bench) outlives it: every process carrying this
  test's marker in its environment has ended within a deadline.

Twenty kills are ``@pytest.mark.slow``; the default suite runs two.
"""

from __future__ import annotations

import hashlib
import os
import queue
import random
import re
import signal
import subprocess
import sys
import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from bench.config import load_bench
from bench.store import RunReader

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="SIGKILL is POSIX only")

RECORD = [
    "record",
    "--seconds",
    "60",
    "--operator",
    "t",
    "--eyewear-od",
    "940nm=5",
    "--eyewear-od",
    "1030nm=2",
    "--confirm-setup",
    "--set",
    "guard.stale_after=2s",
]

#: Environment variable that marks every process a recording under test starts.
MARK = "GAINBENCH_CRASH_TEST_MARK"

_STATUS = re.compile(r"^t\s+([\d.]+) s \|")

#: Where a kill may land: while starting, after the run file exists, while emitting.
PHASES = ("starting", "before_emission", "emitting")


@dataclass
class Kill:
    """One recording and the moment it was killed."""

    phase: str
    delay: float  # s after the phase began
    status_lines: int = 1  # for "emitting": status lines to wait for first
    lines: list[str] = field(default_factory=list)


def _lines(stream, out: queue.Queue) -> None:
    for line in stream:
        out.put(line.rstrip("\n"))
    out.put(None)


def _wait_for(lines: queue.Queue, seen: list[str], done, deadline: float, proc, errors: list[str]) -> None:
    while not done():
        try:
            line = lines.get(timeout=max(0.05, min(0.5, deadline - time.monotonic())))
        except queue.Empty:
            line = ""
        if line is None:
            raise AssertionError(
                f"gainbench record ended (exit {proc.poll()}) before the kill; "
                f"output: {seen[-10:]}; stderr: {''.join(errors)[-2000:]}"
            )
        if line:
            seen.append(line)
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting to kill in phase; output so far: {seen[-10:]}")


def _marked(token: str) -> list:
    import psutil

    found = []
    for p in psutil.process_iter():
        try:
            if p.environ().get(MARK) == token:
                found.append(p)
        except (psutil.NoSuchProcess, psutil.AccessDenied, psutil.ZombieProcess):
            continue
    return found


def _digest(path: Path) -> str | None:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.exists() else None


def _record_and_kill(logs: Path, kill: Kill) -> None:
    token = uuid.uuid4().hex
    env = dict(os.environ, **{MARK: token})
    proc = subprocess.Popen(
        [sys.executable, "-m", "bench", *RECORD, "--logs", str(logs)],
        stdin=subprocess.DEVNULL,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )
    lines: queue.Queue = queue.Queue()
    reader = threading.Thread(target=_lines, args=(proc.stdout, lines), daemon=True)
    reader.start()
    errors: list[str] = []  # stderr, read all along so that its pipe never fills
    threading.Thread(target=lambda: errors.extend(proc.stderr), daemon=True).start()
    seen: list[str] = []
    deadline = time.monotonic() + 120.0  # a loaded machine starts the simulator slowly
    try:
        if kill.phase == "before_emission":
            _wait_for(
                lines,
                seen,
                lambda: any(s.startswith("gainbench: run ") for s in seen),
                deadline,
                proc,
                errors,
            )
        elif kill.phase == "emitting":
            _wait_for(
                lines,
                seen,
                lambda: sum(bool(_STATUS.match(s)) for s in seen) >= kill.status_lines,
                deadline,
                proc,
                errors,
            )
        t_kill = time.monotonic() + kill.delay
        while time.monotonic() < t_kill and proc.poll() is None:  # the moment itself: data flows meanwhile
            time.sleep(0.01)
        import psutil

        try:
            started = psutil.Process(proc.pid).children(recursive=True)
        except psutil.NoSuchProcess:
            started = []
        assert proc.poll() is None, f"gainbench record ended early (exit {proc.returncode}): {seen[-5:]}"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    reader.join(10)  # everything printed before the kill
    while True:
        try:
            line = lines.get_nowait()
        except queue.Empty:
            break
        if line:
            seen.append(line)
    kill.lines = seen

    # no process the recording started outlives it
    deadline = time.monotonic() + 20.0
    alive = _marked(token)
    while alive and time.monotonic() < deadline:
        time.sleep(0.1)
        alive = [p for p in _marked(token) if p.is_running()]
    for p in alive:
        p.kill()
    assert not alive, f"processes outlived the killed recording: {alive} (children seen before: {started})"

    runs = sorted(logs.glob("*.gbrun"))
    status = [float(m.group(1)) for s in seen if (m := _STATUS.match(s))]
    if kill.phase != "starting" or any(s.startswith("gainbench: run ") for s in seen):
        assert len(runs) == 1, f"expected one run file, found {runs}"
    for run in runs:
        wal = Path(f"{run}-wal")
        before = (_digest(run), _digest(wal))
        with RunReader(run) as r:
            r.integrity_check()
            assert r.status == "incomplete" and r.meta["stop_time"] is None
            newest = max((b.t_end for b in r.iter_blocks(source="detector")), default=None)
            r.events()
            r.summary()
        assert (_digest(run), _digest(wal)) == before, "reading the cut-off run changed it"
        if status:
            flush = load_bench().run.flush_interval
            assert newest is not None and newest >= status[-1] - flush - 1.0, (
                f"newest stored detector sample at t = {newest} s, but the last status line said "
                f"t = {status[-1]} s (flush interval {flush} s)"
            )


def _kills(count: int, seed: int) -> list[Kill]:
    rng = random.Random(seed)
    out = []
    for k in range(count):
        phase = "emitting" if k == 0 else rng.choices(PHASES, weights=(3, 4, 13))[0]
        delay = {
            "starting": rng.uniform(0.0, 4.0),
            "before_emission": rng.uniform(0.0, 0.8),
            "emitting": rng.uniform(0.0, 1.5),
        }[phase]
        out.append(Kill(phase, delay, status_lines=rng.randint(1, 4)))
    return out


def _kill_repeatedly(tmp_path, count: int, seed: int) -> None:
    kills = _kills(count, seed)
    for k, kill in enumerate(kills):
        _record_and_kill(tmp_path / f"logs-{k:02d}", kill)
    emitted = [kill for kill in kills if any(_STATUS.match(s) for s in kill.lines)]
    assert emitted, "no recording reached emission before its kill"
    print(f"\n{count} kills: " + ", ".join(f"{kill.phase}+{kill.delay:.2f}s" for kill in kills))


def test_two_kills_during_record(tmp_path):
    _kill_repeatedly(tmp_path, 2, seed=11)


@pytest.mark.slow
@pytest.mark.timeout(1800)
def test_twenty_kills_during_record(tmp_path):
    _kill_repeatedly(tmp_path, 20, seed=20261202)
