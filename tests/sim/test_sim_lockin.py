"""The lock-in driver against the simulated QL-7 lock-in over the real loopback transport
(pyvisa with the pyvisa-py backend): X, Y against `bench.physics.lockin_reading` (itself
checked against solve_ivp in tests/physics), the RC output filter's settling (the Erlang step
response of equal RC poles, Meade, Lock-in Amplifiers, ch. 3) and overload.

The bench is the demo bench with a thin sample (pump absorption sigma_ap N L = 0.01, so the
pump rate is the same along the sample to 1 %), so one k_on describes the medium."""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import constants

from bench import physics
from bench.config import load_bench, load_bench_text
from drivers.registry import open_instrument
from simulated_instruments.instrument_servers import SimulatedBench

CURRENT = 5.36  # A: 1.05 W/A x (5.36 - 0.6) A = 5.0 W


@pytest.fixture(scope="module")
def cfg():
    text = load_bench().text
    text = text.replace('length = "5 mm"', 'length = "0.5 mm"', 1)
    text = text.replace('n_total = "2.0e20 cm^-3"', 'n_total = "2.0e19 cm^-3"', 1)
    text = text.replace(
        'driver = "digitiser"\nresource = "simulated"\nprofile = "generic-digitiser"\ntimeout = "2 s"\n'
        'options = { sample_rate = "100 kHz", range = "2 V", format = "binary" }',
        'driver = "lockin"\nresource = "simulated"\nprofile = "generic-lockin"\ntimeout = "1 s"\n'
        'options = { time_constant = "0.1 s", filter_order = 2, sensitivity = "10 mV" }',
        1,
    )
    assert 'driver = "lockin"' in text
    return load_bench_text(text, "thin-sample lock-in bench")


def expected(cfg, freq):
    """X + iY and DC of the probe from the bench file's parameters and the physics function."""
    s, p, pr = cfg.sample, cfg.pump, cfg.probe
    sg = s.sigma
    area_p = math.pi * p.beam_diameter**2 / 4
    alpha_l = sg.pump_absorption * s.n_total * s.length
    mean_flux = -math.expm1(-alpha_l) / alpha_l  # top-hat pump, Beer-Lambert along the sample
    power = p.slope_efficiency * (CURRENT - p.threshold_current)
    phi_p = power / (area_p * constants.h * constants.c / p.wavelength) * mean_flux
    phi_s = pr.power / (math.pi * pr.beam_diameter**2 / 4 * constants.h * constants.c / pr.wavelength)
    tau = s.upper_state_lifetime
    k_off = 1 / tau + (sg.probe_absorption + sg.probe_emission) * phi_s
    k_on = k_off + (sg.pump_absorption + sg.pump_emission) * phi_p
    n_on = (sg.pump_absorption * phi_p + sg.probe_absorption * phi_s) * s.n_total / k_on
    n_off = sg.probe_absorption * phi_s * s.n_total / k_off
    ln_on = (sg.probe_emission + sg.probe_absorption) * s.length * (n_on - n_off)
    xy, dc = physics.lockin_reading(freq, k_on, k_off, ln_on, cfg.simulation.probe_signal)
    return complex(xy), float(dc) + cfg.simulation.dark_probe


def _open(cfg, sim, role):
    inst = cfg.instruments[role]
    return open_instrument(
        role, inst.driver, sim.resources[role], inst.profile, inst.timeout, dict(inst.options)
    )


def wait_sim(sim, seconds):
    """Wait until ``seconds`` of simulated time have gone by (a deadline, not a fixed sleep)."""
    end = sim.now() + seconds
    deadline = time.monotonic() + 10 * seconds / sim.clock.speed + 5
    while sim.now() < end:
        assert time.monotonic() < deadline, "the simulated clock stopped"
        time.sleep(0.01)


@pytest.fixture
def bench(cfg):
    with SimulatedBench(cfg, speed=2.0) as sim:
        lock = _open(cfg, sim, "detector")
        pump = _open(cfg, sim, "pump")
        lock.configure()
        pump.set_current(CURRENT)
        yield sim, lock, pump
        pump.output(False)
        lock.close()
        pump.close()


@pytest.mark.parametrize("freq", [60.0, 400.0])
def test_x_y_and_dc_match_the_physics(cfg, bench, freq):
    sim, lock, pump = bench
    assert lock.identify().model == "QL-7"
    assert lock.time_constant() == pytest.approx(0.1)
    pump.set_modulation(freq)
    pump.output(True)
    assert lock.reference_frequency() == pytest.approx(freq)
    wait_sim(sim, float(physics.rc_settle_time(0.1, 2, 1e-4)) + 0.05)
    readings = []
    for _ in range(12):
        r = lock.read()
        assert r.overload is False
        readings.append(complex(r.x, r.y))
        wait_sim(sim, 0.5)  # five time constants apart: nearly independent readings
    readings = np.array(readings)
    want, dc = expected(cfg, freq)
    n = readings.size
    # the scatter of the readings is the simulated noise; the mean is within 4 of its sigma
    for part in (np.real, np.imag):
        sigma = float(np.std(part(readings), ddof=1)) / math.sqrt(n)
        assert abs(float(np.mean(part(readings))) - part(want)) < 4 * sigma + 0.005 * abs(want)
    assert float(np.mean(np.angle(readings))) == pytest.approx(np.angle(want), abs=0.05)
    assert lock.read_aux("probe_dc") == pytest.approx(dc, rel=0.01)
    r, theta = lock.read_r_theta()
    assert r == pytest.approx(abs(want), rel=0.15)


def test_output_settles_with_the_time_constant(cfg, bench):
    sim, lock, pump = bench
    lock.set_time_constant(0.3)
    pump.set_modulation(60.0)
    pump.output(True)
    wait_sim(sim, float(physics.rc_settle_time(0.3, 2, 1e-3)))
    x0 = float(np.mean([lock.read_xy()[0] for _ in range(3)]))
    before = sim.now()
    pump.output(False)
    after = sim.now()

    # two equal poles: what is left of a step after t is exp(-t/tc) (1 + t/tc)
    def left(t):
        x = max(t, 0.0) / 0.3
        return math.exp(-x) * (1 + x)

    for target in (0.3, 0.6, 1.2):
        wait_sim(sim, before + target - sim.now())
        t_a = sim.now()
        x = lock.read_xy()[0]
        t_b = sim.now()
        lo, hi = left(t_b - before), left(t_a - after)
        assert lo - 0.06 <= x / x0 <= hi + 0.06, (target, x / x0, lo, hi)


def test_overload_is_reported_and_clears(cfg, bench):
    sim, lock, pump = bench
    pump.set_modulation(60.0)
    pump.output(True)
    wait_sim(sim, 1.0)
    assert lock.read().overload is False
    lock.set_sensitivity(500e-6)  # below the ~2 mV signal
    assert lock.sensitivity() == pytest.approx(500e-6)
    wait_sim(sim, 0.1)
    r = lock.read()
    assert r.overload is True
    assert abs(r.x) <= 1.1 * 500e-6 + 1e-9  # outputs held at the limit
    lock.set_sensitivity(10e-3)
    wait_sim(sim, 1.0)
    assert lock.overloaded() in (True, False)  # clears the latched bit
    assert lock.read().overload is False


def test_no_reference_without_modulation(cfg, bench):
    sim, lock, pump = bench
    assert lock.reference_frequency() == 0.0
    pump.output(True)  # CW pump: nothing at any modulation frequency
    wait_sim(sim, 1.0)
    x, y = lock.read_xy()
    assert abs(x) < 1e-4 and abs(y) < 1e-4
    assert lock.read_aux(2) == pytest.approx(
        cfg.simulation.reference_signal + cfg.simulation.dark_reference, rel=0.01
    )


def test_gainbench_instruments_identifies_the_lockin(capsys):
    from pathlib import Path

    from bench.cli import main

    bench = Path(__file__).resolve().parents[2] / "bench" / "data" / "demo_lockin_bench.toml"
    assert main(["instruments", "--config", str(bench), "--no-scan"]) == 0
    out = capsys.readouterr().out
    assert "lockin via" in out and "QL-7" in out and "QP-40" in out, out
    assert "not reached" not in out, out
