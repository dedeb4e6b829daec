"""``gainbench sim serve`` as a separate process: it prints ROLE RESOURCE lines, serves, and
ends cleanly on SIGINT or SIGTERM (POSIX signals; the command's own contract)."""

from __future__ import annotations

import os
import select
import signal
import subprocess
import sys
import time

import pytest
import pyvisa

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals and select on pipes")

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def start(*args: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "bench", "sim", "serve", *args],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )


def read_lines(proc: subprocess.Popen, count: int, timeout: float = 20.0) -> list[str]:
    """``count`` lines of the child's stdout, waiting at most ``timeout`` s in all."""
    fd = proc.stdout.fileno()
    data = b""
    deadline = time.monotonic() + timeout
    while data.count(b"\n") < count:
        left = deadline - time.monotonic()
        if left <= 0:
            pytest.fail(f"only {data!r} within {timeout} s")
        ready, _, _ = select.select([fd], [], [], left)
        if ready:
            chunk = os.read(fd, 4096)
            if not chunk:
                pytest.fail(f"the server ended early ({proc.wait()}): {proc.stderr.read()!r}")
            data += chunk
    return data.decode().splitlines()[:count]


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_serve_prints_resources_and_stops_on_signal(sig):
    proc = start("--speed", "5", "--fault", "interlock@100s")
    try:
        lines = read_lines(proc, 3)
        roles = dict(line.split(" ", 1) for line in lines)
        assert set(roles) == {"detector", "pump", "shutter"}
        assert roles["pump"].startswith("TCPIP::127.0.0.1::")
        assert roles["shutter"].startswith("socket://127.0.0.1:")
        rm = pyvisa.ResourceManager("@py")
        try:
            pump = rm.open_resource(
                roles["pump"], read_termination="\n", write_termination="\n", timeout=2000
            )
            assert pump.query("*IDN?").startswith("Quillmoor Instruments,QP-40")
            pump.close()
        finally:
            rm.close()
        proc.send_signal(sig)
        assert proc.wait(timeout=5) == 0
        assert b"stopped" in proc.stderr.read()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_bad_fault_spec_is_a_clear_error():
    proc = start("--fault", "meteor@3s")
    out, err = proc.communicate(timeout=20)
    assert proc.returncode == 2
    assert b"fault 'meteor@3s'" in err and b"unknown kind" in err
    assert out == b""


def test_fault_for_an_instrument_the_bench_lacks_is_a_clear_error():
    # The simulator refuses it (SimulatorSetupError); the command reports it as a bench-file
    # mistake: exit status 2 and the simulator's own words, no traceback.
    proc = start("--fault", "drop:wavelength@1s")
    out, err = proc.communicate(timeout=20)
    assert proc.returncode == 2
    assert b"fault 'drop:wavelength@1s': this bench has no wavelength instrument" in err
    assert b"Traceback" not in err
    assert out == b""
