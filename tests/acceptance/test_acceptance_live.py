"""Acceptance: `gainbench live` in a real terminal, chopped mode chosen with `m` at its default
timing, gives a chopped estimate within 4 sigma_noise of the simulated medium's own state.

tmux runs the command at 120 x 40; the keys are the
ones the footer and `?` show: `d` dark, `b` baseline, `m` mode (chopped, timing as offered),
`a` the arming checklist, `e` emission, `s` pump off, `q` quit. The run is then read with
`gainbench summary --json`. Skipped where tmux is not installed.
"""

from __future__ import annotations

import json
import shlex
import shutil
import subprocess
import sys
import time

import pytest
from tmux_session import Tmux, arm_through_checklist, bench_file

pytestmark = [pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed")]


#: Seconds of emission: several hundred chopping cycles at the default period.
EMIT_SECONDS = 5.0


def test_live_chopped_default_timing(tmp_path):
    logs = tmp_path / "logs"
    done = tmp_path / "exit-status"
    config = bench_file(tmp_path)
    command = (
        f"cd {shlex.quote(str(tmp_path))} && env -u COLUMNS -u LINES {shlex.quote(sys.executable)} -m bench live "
        f"--config {shlex.quote(str(config))} --logs {shlex.quote(str(logs))} --operator tester; "
        f"echo $? > {shlex.quote(str(done))}; sleep 60"
    )
    tmux = Tmux(120, 40)
    try:
        tmux.start(command)
        tmux.wait_for("SAFE", timeout=90)
        tmux.keys("d")
        tmux.wait_for("dark captured", timeout=30)
        tmux.keys("b")
        tmux.wait_for("baseline captured", timeout=60)
        tmux.keys("m")
        tmux.wait_for("chopped")
        tmux.keys("Down", "Enter")  # chopped
        tmux.keys("Tab", "Enter")  # keep the offered timing, apply
        tmux.wait_for("mode: chopped", timeout=10)
        arm_through_checklist(tmux)
        tmux.keys("e")
        tmux.wait_for("EMITTING", timeout=20)
        time.sleep(
            EMIT_SECONDS
        )  # the measurement itself: emission for a fixed span, not a wait for a condition
        tmux.keys("s")
        tmux.wait_for("ARMED", timeout=20)
        tmux.keys("q")
        tmux.wait_for("quit?", timeout=20)
        tmux.keys("y")
        deadline = time.monotonic() + 60
        while not done.exists() or not done.read_text().strip():
            assert time.monotonic() < deadline, tmux.screen()
            time.sleep(0.2)
        assert done.read_text().strip() == "0", tmux.screen()
    finally:
        tmux.kill()
    (run,) = logs.glob("*.gbrun")
    out = subprocess.run(
        [sys.executable, "-m", "bench", "summary", run.stem, "--logs", str(logs), "--json"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    s = json.loads(out.stdout)
    assert s["mode"] == "chopped", s["mode"]
    assert s["estimates"], f"no chopped estimate; flags {s['flags']}"
    for name in ("ln_ratio", "beta"):
        est, truth = s["estimates"][name], s["truth"][name]["value"]
        z = (est["value"] - truth) / est["sigma_noise"]
        assert abs(z) <= 4.0, (
            f"{name} = {est['value']:.8g} ± {est['sigma_noise']:.3g}, truth {truth:.8g}: {z:+.1f}"
        )
