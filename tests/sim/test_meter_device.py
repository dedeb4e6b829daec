"""The simulated QM-3 meter on the simulated bench, through the real stack (the meter driver,
pyvisa with the pyvisa-py backend over loopback TCP), against its command reference
(simulated_instruments/COMMANDS.md) and the bench file's [simulation] levels.

The signal levels come from the bench file (probe 0.8 V, reference 0.6 V, plus the dark
offsets 3 mV and 2 mV), not from the meter's code. The averaging check uses the standard error
of a mean of N independent samples, sigma / sqrt(N) (any statistics text, e.g. J. R. Taylor,
*An Introduction to Error Analysis*, 2nd ed., section 4.4).
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pytest

from bench.cli import main
from bench.config import load_bench
from drivers.errors import InstrumentReportedError
from drivers.registry import open_instrument
from simulated_instruments.instrument_servers import SimulatedBench
from simulated_instruments.meter_device import CONVERSION_RATE

METER_BENCH = Path(__file__).resolve().parents[2] / "bench" / "data" / "demo_meter_bench.toml"


@pytest.fixture(scope="module")
def cfg():
    return load_bench(METER_BENCH)


@pytest.fixture
def sim(cfg):
    with SimulatedBench(cfg, speed=1.0) as bench:
        yield bench


def open_meter(cfg, sim, profile=None, options=None):
    inst = cfg.instruments["detector"]
    return open_instrument(
        "detector",
        inst.driver,
        sim.resources["detector"],
        profile or inst.profile,
        inst.timeout,
        dict(inst.options) if options is None else options,
    )


def readings(sim, m, count: int, spacing: float) -> np.ndarray:
    """``count`` readings, each at least ``spacing`` s of simulated time after the one before
    (waited for on the simulator's clock, with a deadline)."""
    out = []
    deadline = time.monotonic() + 30
    t_next = sim.now()
    while len(out) < count:
        assert time.monotonic() < deadline, "the simulator's clock stopped"
        if sim.now() < t_next:
            time.sleep(0.001)
            continue
        t_next = sim.now() + spacing
        out.append(m.read(time.monotonic).values)
    return np.array(out)


def test_the_meter_is_served_for_a_meter_bench(cfg, sim):
    with open_meter(cfg, sim) as m:
        ident = m.identify()
        assert (ident.maker, ident.model) == ("Quillmoor Instruments", "QM-3")


def test_readings_sit_at_the_bench_files_levels(cfg, sim):
    with open_meter(cfg, sim) as m:
        m.configure()
        assert m.range_v == 2.0 and m.averages == 20
        r = readings(sim, m, 10, 0.005)
    probe, ref, monitor = np.median(r, axis=0)
    assert probe == pytest.approx(0.8 + 0.003, abs=0.01)  # probe_signal + dark_probe
    assert ref == pytest.approx(0.6 + 0.002, abs=0.01)  # reference_signal + dark_reference
    assert abs(monitor) < 0.005  # pump off: no pump light on the monitor


def test_averaging_more_conversions_narrows_the_scatter(cfg, sim):
    with open_meter(cfg, sim) as m:
        m.configure(averages=1)
        one = readings(sim, m, 80, 2.0 / CONVERSION_RATE)
        m.configure(averages=100)
        # readings apart by more than their averaging span, so independent of each other
        hundred = readings(sim, m, 80, 120.0 / CONVERSION_RATE)
    for ch in (0, 1):
        ratio = np.std(one[:, ch], ddof=1) / np.std(hundred[:, ch], ddof=1)
        # sigma / sqrt(N): sqrt(100) = 10; 80 readings give each std to about 8 %
        assert 6.5 < ratio < 15, (ch, ratio)


def test_range_and_averages_are_checked_by_the_instrument(cfg, sim):
    with open_meter(cfg, sim) as m:
        m.configure(range_v=10.0)
        assert m.range_v == 10.0
        with pytest.raises(InstrumentReportedError) as exc:  # 3 V is not a range: -224
            m.configure(range_v=3.0)
        assert exc.value.code == -224
        with pytest.raises(InstrumentReportedError) as exc:  # above 1000 averages: -222
            m.configure(averages=1001)
        assert exc.value.code == -222
        assert int(m.session.query("averages")) == 20  # unchanged, power-on default


def test_saturated_input_reads_the_range_not_beyond(cfg, sim):
    with open_meter(cfg, sim) as m:
        m.configure(range_v=2.0)
        sim.inject("saturate")
        deadline = time.monotonic() + 5
        while True:
            try:
                probe = m.read(time.monotonic).values[0]
            except InstrumentReportedError:  # "Input over range" is queued once: fine
                continue
            if probe > 1.9 or time.monotonic() > deadline:
                break
        # COMMANDS.md: inputs clip at +-range (a clipped input reads +range - 1 LSB)
        assert 1.9 < probe <= 2.0


def test_channel_by_channel_profile_reads_the_same_levels(cfg, sim, tmp_path):
    text = (Path(__file__).resolve().parents[2] / "drivers" / "profiles" / "generic-meter.toml").read_text()
    text = "\n".join(line for line in text.splitlines() if not line.startswith("read_all"))
    path = tmp_path / "one-channel-at-a-time.toml"
    path.write_text(text)
    with open_meter(cfg, sim, profile=str(path)) as m:
        assert not m.session.has("read_all")
        r = readings(sim, m, 5, 0.005)
    assert np.median(r[:, 0]) == pytest.approx(0.803, abs=0.01)
    assert np.median(r[:, 1]) == pytest.approx(0.602, abs=0.01)


def test_truth_and_clock_count_from_power_on(cfg, sim):
    with open_meter(cfg, sim) as m:
        t_meter = m.clock()
        truth = m.sim_truth()
        assert 0 <= t_meter <= sim.now() + 1e-9
        assert truth["t"] >= t_meter
        assert truth["tau"] == pytest.approx(0.6e-3)  # upper_state_lifetime of the bench file


def test_gainbench_instruments_identifies_the_meter(capsys):
    assert main(["instruments", "--config", str(METER_BENCH), "--no-scan"]) == 0
    out = capsys.readouterr().out
    assert "meter via" in out and "QM-3" in out and "QP-40" in out
