"""Device faults an instrument reports only in its error queue, and what an earlier run left.

- A pump driver fault during emission (the simulator's ``error:pump`` fault pushes error 300,
  "Device fault", see simulated_instruments/COMMANDS.md) trips the guard and is recorded.
- An error entry left in the queue from before a run is cleared at its start (and noted), not
  blamed on the run's first setting.
- A digitiser left acquiring by a run that crashed does not block the next run's settings
  (COMMANDS.md: ``CONF:RATE`` is refused with -221 while acquiring).
- The driver switching its output off by itself while the guard commands it on trips.

The simulated bench runs in a process of its own (`gainbench sim serve`) and is reached only
over loopback; the faults and the checks of the pump's state go over plain pyvisa sessions.
"""

from __future__ import annotations

import subprocess
import sys

from cli_flags import ARM
from test_record_signals import _read_until, plain_query, serve_external

from bench.store import RunReader


def _record(*args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "bench", "record", *args], capture_output=True, text=True, timeout=timeout
    )


def _events(logs):
    (run_file,) = logs.glob("*.gbrun")
    with RunReader(run_file) as r:
        return r.status, list(r.events())


def test_a_pump_device_error_while_emitting_trips(tmp_path):
    logs = tmp_path / "logs"
    # the fault's time counts from the simulator's start: 4 s leaves room for the dark, the
    # baseline and arming on a loaded machine (at 2 s the error could reach the current setting
    # before emission, which then refuses the run instead)
    done = _record("--seconds", "5", "--fault", "error:pump@4s", "--logs", str(logs), "--quiet", *ARM)
    assert done.returncode == 0, done.stderr  # tripped, then acknowledged
    status, events = _events(logs)
    trips = [e for e in events if e.kind == "trip"]
    assert [e.data.get("condition") for e in trips] == ["device_error"], [e.text for e in trips]
    assert "300" in trips[0].text and "Device fault" in trips[0].text
    assert any(e.kind == "fault" and "300" in e.text for e in events)


def test_an_error_left_in_the_queue_is_cleared_at_start_not_blamed_on_the_run(tmp_path):
    # the simulated driver pushes its error at once, before any run connects
    with serve_external(tmp_path, "--fault", "error:pump@0s") as (bench, resources):
        logs = tmp_path / "logs"
        done = _record(
            "--config", str(bench), "--seconds", "1", "--no-dark", "--logs", str(logs), "--quiet", *ARM
        )
        assert done.returncode == 0, done.stderr
        status, events = _events(logs)
        assert status == "complete"
        assert not [e.text for e in events if e.kind in ("trip", "fault")]
        noted = [e for e in events if e.kind == "run" and "error queue at start" in e.text]
        assert noted and "300" in noted[0].text, [e.text for e in events if e.kind == "run"]
        assert any(e.kind == "guard" and "-> emitting" in e.text for e in events)
        assert plain_query(resources["pump"], "SYST:ERR?").startswith("0")


def test_a_digitiser_left_acquiring_does_not_block_the_next_run(tmp_path):
    with serve_external(tmp_path) as (bench, resources):
        plain_query(resources["detector"], "INIT")  # as a run that crashed leaves it
        logs = tmp_path / "logs"
        done = _record(
            "--config", str(bench), "--seconds", "1", "--no-dark", "--logs", str(logs), "--quiet", *ARM
        )
        assert done.returncode == 0, done.stderr
        status, events = _events(logs)
        assert status == "complete"
        assert any(e.kind == "guard" and "-> emitting" in e.text for e in events)


def test_the_driver_switching_its_output_off_by_itself_trips(tmp_path):
    # "another connection sends the off command": a second client of the simulated driver
    with serve_external(tmp_path) as (bench, resources):
        logs = tmp_path / "logs"
        proc = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "bench",
                "record",
                "--config",
                str(bench),
                "--seconds",
                "30",
                "--no-dark",
                "--logs",
                str(logs),
                *ARM,
            ],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        try:
            _read_until(proc, r"guard emitting", timeout=60)
            assert plain_query(resources["pump"], "OUTP?") == "1"
            plain_query(resources["pump"], "OUTP OFF")
            lines = _read_until(proc, r"guard TRIPPED", timeout=20)
            proc.wait(60)
        finally:
            if proc.poll() is None:
                proc.kill()
        assert "output reads off" in lines[-1] and "commanded it on" in lines[-1], lines[-1]
        status, events = _events(logs)
        trips = [e for e in events if e.kind == "trip"]
        assert trips and trips[0].data.get("condition") == "output_off_unexpected", [e.text for e in trips]
        assert plain_query(resources["pump"], "OUTP?") == "0"
        # the trip came soon after the reading that showed it (within the guard's grace and a poll)
        assert trips[0].data.get("latency_s") is not None and trips[0].data["latency_s"] < 1.0
