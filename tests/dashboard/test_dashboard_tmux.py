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
from tmux_session import Tmux, arm_through_checklist, bench_file

from bench.store import RunReader

pytestmark = [
    pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed"),
]

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def tmux():
    t = Tmux(120, 40)
    yield t
    t.kill()


def test_live_in_a_terminal_arm_and_quit(tmux, tmp_path):
    logs = tmp_path / "logs"
    done = tmp_path / "exit-status"
    config = bench_file(tmp_path)
    # COLUMNS / LINES inherited from the test runner would override the pane's real size; stdout
    # stays on the terminal (textual asks stdout for the terminal's size when it changes)
    command = (
        f"cd {shlex.quote(str(ROOT))} && env -u COLUMNS -u LINES {shlex.quote(sys.executable)} -m bench live "
        f"--config {shlex.quote(str(config))} "
        f"--logs {shlex.quote(str(logs))} --operator smoke; "
        f"echo $? > {shlex.quote(str(done))}; sleep 60"
    )
    tmux.start(command)
    screen = tmux.wait_for("SIMULATED BENCH", timeout=90)
    assert "instruments" in screen, "at 120 x 40 the full layout shows the instruments panel"
    screen = tmux.wait_for("SAFE")
    assert "output off" in screen and "interlock closed" in tmux.wait_for("interlock closed")

    arm_through_checklist(tmux)
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


def test_live_on_the_lockin_bench_at_80x24_opens_in_lockin_mode(tmp_path):
    """`gainbench live --config bench/data/demo_lockin_bench.toml`, as the README gives it, in
    an 80 x 24 terminal: the lock-in bench's own mode at its default frequency (a tenth of the
    medium's corner (1/tau + W_s)/(2 pi), with tau = 0.6 ms a little over 26.5 Hz, rounded down
    to 25 Hz), no estimate while the pump is off, and a clean quit."""
    tmux = Tmux(80, 24)
    try:
        logs = tmp_path / "logs"
        done = tmp_path / "exit-status"
        config = ROOT / "bench" / "data" / "demo_lockin_bench.toml"
        command = (
            f"cd {shlex.quote(str(ROOT))} && env -u COLUMNS -u LINES {shlex.quote(sys.executable)} -m bench live "
            f"--config {shlex.quote(str(config))} --logs {shlex.quote(str(logs))} --operator smoke; "
            f"echo $? > {shlex.quote(str(done))}; sleep 60"
        )
        tmux.start(command)
        tmux.wait_for("mode lockin", timeout=90)  # the run panel, once the run file is open
        tmux.wait_for("estimate (lockin")  # (the status line's mode message may be overwritten)
        time.sleep(2.0)
        assert "no estimate yet" in tmux.screen()
        tmux.keys("q")
        tmux.wait_for("Close the run and quit?")
        tmux.keys("y")
        deadline = time.monotonic() + 60
        while not done.exists() or not done.read_text().strip():
            assert time.monotonic() < deadline, tmux.screen()
            time.sleep(0.2)
        assert done.read_text().strip() == "0"
        (run,) = logs.glob("*.gbrun")
        with RunReader(run) as r:
            texts = [e.text for e in r.events()]
        assert "pump modulation 25 Hz" in texts, texts
    finally:
        tmux.kill()
