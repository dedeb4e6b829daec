"""A bench-file override (``--set simulation.KEY=VALUE``) reaches the simulator, which runs in a
process of its own: the probe level the detector reads follows a changed ``probe_signal``."""

from __future__ import annotations

import time

import pytest

from bench.config import load_bench
from bench.run.measurement import Measurement


@pytest.mark.parametrize("volts", [0.4, 1.2])
def test_simulation_override_reaches_the_simulator_process(tmp_path, volts):
    cfg = load_bench(overrides={"simulation.probe_signal": f"{volts} V", "guard.stale_after": "3 s"})
    with Measurement(cfg, log_dir=tmp_path, record=False) as m:
        deadline = time.monotonic() + 30
        while not m.snapshot(with_history=False).levels:
            assert time.monotonic() < deadline, "no detector data"
            time.sleep(0.05)
        probe = m.snapshot(with_history=False).levels["probe"]
    # unpumped probe = probe_signal (x source drift, under 1 % in a second) + 3 mV dark (demo bench)
    assert probe == pytest.approx(volts + 0.003, rel=0.02)
