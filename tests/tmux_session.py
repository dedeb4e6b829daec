"""A tmux server of a test's own, to drive a terminal program as a person does: start it in a
pane of a given size, send keys, read the screen (capture-pane), wait for text with a deadline."""

from __future__ import annotations

import os
import subprocess
import time
import uuid
from pathlib import Path

from bench.config import builtin_bench_path


class Tmux:
    """One tmux server of our own (its own socket), one session, one pane."""

    def __init__(self, width: int, height: int) -> None:
        self.socket = f"gainbench-test-{os.getpid()}-{uuid.uuid4().hex[:6]}"
        self.session = "live"
        self.width, self.height = width, height

    def run(self, *args: str, check: bool = True) -> str:
        out = subprocess.run(["tmux", "-L", self.socket, *args], capture_output=True, text=True, timeout=20)
        if check and out.returncode != 0:
            raise AssertionError(f"tmux {' '.join(args)}: {out.stderr}")
        return out.stdout

    def start(self, command: str) -> None:
        self.run(
            "new-session", "-d", "-s", self.session, "-x", str(self.width), "-y", str(self.height), command
        )
        self.run(
            "resize-window", "-t", self.session, "-x", str(self.width), "-y", str(self.height), check=False
        )

    def screen(self) -> str:
        return self.run("capture-pane", "-p", "-t", self.session, check=False)

    def keys(self, *keys: str) -> None:
        self.run("send-keys", "-t", self.session, *keys)

    def wait_for(self, text: str, timeout: float = 60.0) -> str:
        deadline = time.monotonic() + timeout
        while True:
            screen = self.screen()
            if text in screen:
                return screen
            if time.monotonic() > deadline:
                raise AssertionError(
                    f"timed out after {timeout} s waiting for {text!r} on the screen:\n{screen}"
                )
            time.sleep(0.2)

    def kill(self) -> None:
        self.run("kill-server", check=False)


def bench_file(tmp_path: Path) -> Path:
    """The built-in simulated bench, with the guard's staleness limit at 3 s instead of 0.5 s:
    the terminal tests drive the keys, not the guard's timing (tests/safety/test_guard_on_bench.py
    does), and a loaded 2-core test machine can starve any process for half a second."""
    text = builtin_bench_path().read_text(encoding="utf-8")
    assert 'stale_after = "0.5 s"' in text
    path = tmp_path / "bench.toml"
    path.write_text(text.replace('stale_after = "0.5 s"', 'stale_after = "3 s"'), encoding="utf-8")
    return path


def arm_through_checklist(tmux: Tmux) -> str:
    """Answer the dashboard's arming checklist one question at a time, as a person does (the
    operator named on the command line, OD 5 at 940 nm and 2 at 1030 nm, the setup confirmed);
    returns the screen once the guard reads armed."""
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
    return tmux.wait_for("ARMED")
