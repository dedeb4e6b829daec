"""A bench file that says it is real (``bench.simulated = false``) but names the simulator
(``resource = "simulated"``) is refused: its runs would be stored as real data, with no
simulation banner, tag or ground truth. Checked through `gainbench check` and `record`."""

from __future__ import annotations

import subprocess
import sys

from cli_flags import ARM

from bench.config import builtin_bench_path


def _real_bench_naming_the_simulator(tmp_path):
    text = builtin_bench_path().read_text(encoding="utf-8").replace("simulated = true", "simulated = false")
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _gainbench(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "bench", *args], capture_output=True, text=True, timeout=120)


def test_check_refuses_it_naming_the_file_key_and_line(tmp_path):
    path = _real_bench_naming_the_simulator(tmp_path)
    done = _gainbench("check", str(path))
    assert done.returncode == 2, done.stdout + done.stderr
    assert str(path) in done.stderr and "instruments.detector.resource" in done.stderr
    assert "(line " in done.stderr and "bench.simulated is false" in done.stderr
    assert "Traceback" not in done.stderr


def test_record_refuses_it_before_anything_is_recorded(tmp_path):
    path = _real_bench_naming_the_simulator(tmp_path)
    logs = tmp_path / "logs"
    done = _gainbench("record", "--config", str(path), "--seconds", "1", "--logs", str(logs), *ARM)
    assert done.returncode == 2, done.stdout + done.stderr
    assert "bench.simulated is false" in done.stderr and "Traceback" not in done.stderr
    assert not logs.exists() or not list(logs.iterdir())
