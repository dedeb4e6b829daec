"""The bench file's pump power calibration against a power the bench measures.

A wrong ``pump.slope_efficiency`` (here 1e-6 W/A, a unit slip) makes the tool believe the pump
is weak, and the eyewear checklist then asks for too little. While the pump emits, the tool
compares its calibration with the pump driver's own power reading (``MEAS:POW?`` of the
simulated driver, simulated_instruments/COMMANDS.md) and, in steady modes, with the pump
monitor photodiode through its responsivity (``simulation.pump_monitor_per_watt``); more than
a factor `CALIBRATION_FACTOR` apart trips the guard with both figures. The simulator's own
record of the pump power delivered (its ground truth, ``pump_W``) confirms the pump was strong.
"""

from __future__ import annotations

import subprocess
import sys

import pytest
from cli_flags import ARM
from waiting import wait_until

from bench.config import load_bench, load_bench_text
from bench.run.measurement import Measurement
from bench.safety import conditions as tc
from bench.safety.checklist_answers import answers_from_flags
from bench.store import RunReader


def test_the_check_passes_within_the_factor_and_names_both_figures_outside_it():
    assert tc.check_power_calibration(6.9, 6.0, 7.2, "the driver", 1.0) is None
    assert tc.check_power_calibration(6.9, 6.9 / 1.9, 7.2, "the driver", 1.0) is None
    assert tc.check_power_calibration(1e-5, 2e-4, 1.0, "the driver", 1.0) is None  # both below the floor
    c = tc.check_power_calibration(6.6e-6, 6.93, 7.2, "the driver", 1.5)
    assert c is not None and c.condition == tc.POWER_CALIBRATION
    assert "6.6e-06 W" in c.reason and "6.93 W" in c.reason and "7.2 A" in c.reason and c.seen_at == 1.5
    # too strong a calibration is as wrong as too weak (the guard's limits assume it)
    assert tc.check_power_calibration(20.0, 6.9, 7.2, "the driver", 1.0) is not None


def _weak_cfg():
    return load_bench_text(
        load_bench().text, "demo", overrides={"pump.slope_efficiency": "1e-6 W/A", "guard.stale_after": "2 s"}
    )


def test_record_trips_on_a_calibration_that_disagrees_with_the_drivers_power_reading(tmp_path):
    logs = tmp_path / "logs"
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "bench",
            "record",
            "--seconds",
            "3",
            "--logs",
            str(logs),
            "--quiet",
            *ARM,
            "--set",
            "pump.slope_efficiency=1e-6W/A",
            # the override lowers the eyewear OD the checklist asks for, which is
            # refused without this flag (tests/test_bad_input.py); given, the
            # guard's comparison with the driver's reading is the next layer
            "--accept-lower-od",
        ],
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert "guard TRIPPED: pump power calibration disagrees" in done.stdout, done.stdout + done.stderr
    (run_file,) = logs.glob("*.gbrun")
    with RunReader(run_file) as r:
        trips = [e for e in r.events() if e.kind == "trip"]
        truth = r.truth()
    assert trips[0].data.get("condition") == tc.POWER_CALIBRATION
    assert "pump driver's power reading" in trips[0].text
    # the simulator's ground truth: the pump really delivered watts, not microwatts
    assert max(row["pump_w"] for row in truth) > 1.0


def test_without_a_driver_power_reading_the_pump_monitor_is_compared(tmp_path):
    cfg = _weak_cfg()
    current = 6.0
    m = Measurement(
        cfg, log_dir=tmp_path, settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)}
    )
    with m:
        session = m.instruments["pump"].session
        has = session.has
        session.has = lambda op: op != "power" and has(op)  # a driver whose profile has no power reading
        m.capture_baseline(0.1)
        assert m.arm(answers_from_flags("tester", {940e-9: 5, 1030e-9: 2}, True), "tester").passed
        m.set_current(current, who="tester")
        m.emit("tester")
        wait_until(lambda: m.guarded_pump.state == "tripped", 10, "a trip")
        assert tc.POWER_CALIBRATION in m.guarded_pump.held, m.guarded_pump.trip_reason
        assert "pump monitor" in m.guarded_pump.trip_reason
        wait_until(lambda: not m.sim.pump_output_on(), 5, "the simulated pump to be off")


@pytest.mark.parametrize("mode", ["watch"])
def test_a_right_calibration_does_not_trip(tmp_path, mode):
    cfg = load_bench_text(load_bench().text, "demo", overrides={"guard.stale_after": "2 s"})
    current = 6.0
    m = Measurement(
        cfg,
        mode=mode,
        log_dir=tmp_path,
        settings={"pump_current": current, "pump_power": cfg.pump.power_at(current)},
    )
    with m:
        m.capture_baseline(0.1)
        assert m.arm(answers_from_flags("tester", {940e-9: 5, 1030e-9: 2}, True), "tester").passed
        m.set_current(current, who="tester")
        m.emit("tester")
        m.hold(1.5)  # several checks (every 0.25 s once the current has settled)
        assert m.guarded_pump.state == "emitting", m.guarded_pump.trip_reason
