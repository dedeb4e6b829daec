"""A tmux server of a test's own, to drive a terminal program as a person does: start it in a
pane of a given size, send keys, read the screen (capture-pane), wait for text with a deadline."""

from __future__ import annotations

import os
import subprocess
import time
import uuid


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
        self.run("new-session", "-d", "-s", self.session, "-x", str(self.width), "-y", str(self.height), command)
        self.run("resize-window", "-t", self.session, "-x", str(self.width), "-y", str(self.height), check=False)

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
                raise AssertionError(f"timed out after {timeout} s waiting for {text!r} on the screen:\n{screen}")
            time.sleep(0.2)

    def kill(self) -> None:
        self.run("kill-server", check=False)
