"""Smoke test of `gainbench live` in a real terminal: tmux runs it, capture-pane reads the screen.

The command starts on the built-in simulated bench; the test reads the banner and the guard
panel, arms through the checklist with keys, quits (pump off, confirm, run closed) and checks
the run file. Skipped when tmux is not installed (about 15 s where it is).
"""

from __future__ import annotations

import shlex
import shutil
import sys
import time
from pathlib import Path

import pytest

from bench.config import builtin_bench_path
from bench.runstore import RunReader
from tmux_session import Tmux

pytestmark = [
    pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed"),
]

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def tmux():
    t = Tmux(120, 40)
    yield t
    t.kill()


def bench_file(tmp_path: Path) -> Path:
    """The built-in simulated bench, with the guard's staleness limit at 3 s instead of 0.5 s:
    this test drives the keys, not the guard's timing (tests/test_guard_on_bench.py does), and a
    loaded 2-core test machine can starve any process for half a second."""
    text = builtin_bench_path().read_text(encoding="utf-8")
    assert 'stale_after = "0.5 s"' in text
    path = tmp_path / "bench.toml"
    path.write_text(text.replace('stale_after = "0.5 s"', 'stale_after = "3 s"'), encoding="utf-8")
    return path


def test_live_in_a_terminal_arm_and_quit(tmux, tmp_path):
    logs = tmp_path / "logs"
    done = tmp_path / "exit-status"
    config = bench_file(tmp_path)
    # COLUMNS / LINES inherited from the test runner would override the pane's real size; stdout
    # stays on the terminal (textual asks stdout for the terminal's size when it changes)
    command = (f"cd {shlex.quote(str(ROOT))} && env -u COLUMNS -u LINES {shlex.quote(sys.executable)} -m bench live "
               f"--config {shlex.quote(str(config))} "
               f"--logs {shlex.quote(str(logs))} --operator smoke; "
               f"echo $? > {shlex.quote(str(done))}; sleep 60")
    tmux.start(command)
    screen = tmux.wait_for("SIMULATED BENCH", timeout=90)
    assert "instruments" in screen, "at 120 x 40 the full layout shows the instruments panel"
    screen = tmux.wait_for("SAFE")
    assert "output off" in screen and "interlock closed" in tmux.wait_for("interlock closed")

    tmux.keys("a")
    tmux.wait_for("SECOND LAYER ONLY")
    tmux.keys("Enter")  # the operator's name, given on the command line
    tmux.wait_for("ok: the hardware interlock reads closed")
    tmux.keys("Enter")
    tmux.wait_for("[2/8] Laser-safety eyewear at 940 nm")
    tmux.keys("5", "Enter")
    tmux.wait_for("[3/8] Laser-safety eyewear at 1030 nm")
    tmux.keys("2", "Enter")
    for number in (4, 5, 6):
        tmux.wait_for(f"[{number}/8]")
        tmux.keys("y")
    for number in (7, 8):
        tmux.wait_for(f"[{number}/8]")
        tmux.wait_for("ok: ")
        tmux.keys("Enter")
    tmux.wait_for("Arming checklist passed")
    tmux.keys("Enter")
    screen = tmux.wait_for("◇ ARMED")
    assert "pump still off" in screen

    tmux.keys("q")
    tmux.wait_for("Close the run and quit?")
    tmux.keys("y")
    deadline = time.monotonic() + 60
    while not done.exists() or not done.read_text().strip():
        assert time.monotonic() < deadline, tmux.screen()
        time.sleep(0.2)
    assert done.read_text().strip() == "0"
    runs = list(logs.glob("*.gbrun"))
    assert len(runs) == 1
    assert f"run {runs[0].stem} closed; the pump output is off" in tmux.wait_for("the pump output is off")
    with RunReader(runs[0]) as r:
        assert r.status == "complete"
        events = r.events()
    assert any(e.kind == "checklist" and e.data.get("passed") is True for e in events)
    assert any(e.kind == "guard" and e.data.get("to") == "armed" and e.who == "smoke" for e in events)
