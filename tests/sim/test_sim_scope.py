"""The simulated pulsed pump and the simulated QO-4 scope.

Checks against references outside the code under test: the duty-cycle wave against a plain
``numpy.mod`` phase test, the 50 % wave against the half-period rule it always had; the
medium's excitation at the end of a rectangular pump pulse and its decay after it against the
closed-form solution of the two-level rate equation (Koechner, Solid-State Laser Engineering,
6th ed., sec. 1.4) for the thin demo plate (pump absorption 5 %: one pump rate, the mean of the
Beer-Lambert profile, describes it to about 1 %); the scope's records against the bench file's
levels (probe_signal + dark_probe, pump_monitor_per_watt) and its averaging against the
1/sqrt(n) fall of uncorrelated noise (common practice, no source). The block parsing here is
the test's own (IEEE 488.2 definite-length block, ``#<d><len><payload>``).
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import constants

from bench.config import load_bench
from drivers.registry import open_instrument
from simulated_instruments.clock import SimClock
from simulated_instruments.drive import SquareWave
from simulated_instruments.instrument_servers import SimulatedBench
from simulated_instruments.optical_setup import BenchModel
from simulated_instruments.scope_device import ScopeDevice
from simulated_instruments.shared_state import BenchCore

BENCH = "bench/data/demo_pulsed_bench.toml"
CURRENT = 7.2  # A: 1.05 W/A x (7.2 - 0.6) A = 6.93 W
WIDTH, PERIOD = 0.5e-3, 10e-3


@pytest.fixture(scope="module")
def cfg():
    from pathlib import Path

    return load_bench(Path(__file__).resolve().parents[2] / BENCH)


def test_half_duty_wave_is_the_half_period_rule():
    w = SquareWave(37.0, 0.0123)
    t = np.linspace(0, 1, 100_001)
    ref = np.floor((t - 0.0123) * 2 * 37.0) % 2 == 0
    assert np.array_equal(w.is_high(t), ref)
    assert w.next_edge(0.0123) == pytest.approx(0.0123 + 0.5 / 37.0)


@pytest.mark.parametrize("duty", [0.05, 0.3, 0.9])
def test_duty_wave_is_high_for_its_width_each_period(duty):
    w = SquareWave(100.0, 0.002, duty=duty)
    t = np.linspace(0.0, 0.5, 200_003)
    ref = np.mod(t - 0.002, 0.01) < duty * 0.01
    high = w.is_high(t)
    # the two tests may differ on a sample within rounding of an edge
    assert np.count_nonzero(high != ref) <= 2
    assert high.mean() == pytest.approx(duty, abs=1e-3)
    e1 = w.next_edge(0.002)
    assert e1 == pytest.approx(0.002 + duty * 0.01)
    assert w.next_edge(e1) == pytest.approx(0.012)
    assert w.last_edge(0.0121) == pytest.approx(0.012)  # after the rise, before the fall
    fall = 0.012 + duty * 0.01
    assert w.last_edge(0.0199) == pytest.approx(fall if fall <= 0.0199 else 0.012)


def test_duty_cycle_must_be_a_fraction():
    with pytest.raises(ValueError, match="duty"):
        SquareWave(10.0, 0.0, duty=1.0)


def _rates(cfg):
    s, p, pr = cfg.sample, cfg.pump, cfg.probe
    sg = s.sigma
    alpha_l = sg.pump_absorption * s.n_total * s.length
    mean_flux = -math.expm1(-alpha_l) / alpha_l  # top-hat pump, Beer-Lambert along the sample
    power = p.slope_efficiency * (CURRENT - p.threshold_current)
    phi_p = power / (math.pi * p.beam_diameter**2 / 4 * constants.h * constants.c / p.wavelength) * mean_flux
    phi_s = pr.power / (math.pi * pr.beam_diameter**2 / 4 * constants.h * constants.c / pr.wavelength)
    k_off = 1 / s.upper_state_lifetime + (sg.probe_absorption + sg.probe_emission) * phi_s
    k_on = k_off + (sg.pump_absorption + sg.pump_emission) * phi_p
    n_on = (sg.pump_absorption * phi_p + sg.probe_absorption * phi_s) * s.n_total / k_on
    n_off = sg.probe_absorption * phi_s * s.n_total / k_off
    return k_on, k_off, n_on, n_off


def test_a_rectangular_pump_pulse_excites_and_the_medium_decays_as_the_rate_equation_says(cfg):
    model = BenchModel(cfg)
    model.start_acquisition(200e3)
    model.set_pump(current=CURRENT)
    model.set_pulse_width(WIDTH)
    model.set_pulse_period(PERIOD)
    model.set_pulsing(True)
    model.set_pump(on=True)
    model.generate(40_000)  # 0.2 s: past the 20 ms current ramp, 20 pulses
    k_on, k_off, n_on, n_off = _rates(cfg)
    # N2(t_w) = n_on + (n_before - n_on) exp(-k_on t_w); n_before = n_off (16 lifetimes apart)
    peak = n_on + (n_off - n_on) * math.exp(-k_on * WIDTH)
    tr = model.pulse_truth()
    assert tr["pulses"] >= 19
    assert tr["n2_peak"] == pytest.approx(peak, rel=0.01)
    assert tr["n2_before"] == pytest.approx(n_off, rel=0.01)
    # after the pulse: N2 - n_off falls as exp(-k_off t)
    data, first, truth = model.generate_with_truth(2000)
    t, n2 = truth.t, truth.n2_avg
    wave = model.pump.pulse_train
    phase = np.mod(t - wave.t_ref, PERIOD)
    after = (phase > WIDTH + 20e-6) & (phase < WIDTH + 3e-3)
    cycle = np.floor((t - wave.t_ref) / PERIOD)
    one = after & (cycle == cycle[after][0])
    slope = np.polyfit(phase[one], np.log(n2[one] - n_off), 1)[0]
    assert -slope == pytest.approx(k_off, rel=2e-3)


def test_pulsing_heats_the_mount_with_its_duty_cycle(cfg):
    model = BenchModel(cfg)
    model.set_pump(current=CURRENT)
    model.set_pulse_width(WIDTH)
    model.set_pulse_period(PERIOD)
    model.set_pulsing(True)
    model.set_pump(on=True)
    # the thermal input is the time-averaged current: the duty cycle of the ramped level
    assert model.pump.mean_current(1.0, 2.0) == pytest.approx(CURRENT * WIDTH / PERIOD)


def _block(reply: bytes) -> bytes:
    assert reply[:1] == b"#"
    d = int(reply[1:2])
    n = int(reply[2 : 2 + d])
    payload = reply[2 + d :]
    assert len(payload) == n + 1 and payload[-1:] == b"\n"  # the block, then the terminator
    return payload[:n]


def _ask(session, text: str) -> bytes:
    (reply,) = session.receive(text.encode() + b"\n")
    return reply if text.startswith("REC:CODE") else reply.rstrip(b"\n")


def _acquire_raw(session, deadline_s: float = 5.0):
    session.receive(b"CAPT:ARM\n")
    end = time.monotonic() + deadline_s
    while _ask(session, "CAPT:DONE?") != b"1":
        assert time.monotonic() < end, "the QO-4 did not complete"
        time.sleep(0.002)


def test_the_scope_records_int8_and_int16_codes_with_their_scaling(cfg):
    model = BenchModel(cfg)
    core = BenchCore(model, SimClock(speed=5.0))
    scope = ScopeDevice(core)
    session = scope.session()
    with core.lock:
        core.sync()
        model.set_pump(current=CURRENT)
        model.set_pulse_width(WIDTH)
        model.set_pulsing(True)
        model.set_pump(on=True)
    time.sleep(0.01)
    records = {}
    for fmt, dtype in (("I16", "<i2"), ("I8", "i1")):
        session.receive(f"REC:FORM {fmt}\n".encode())
        _acquire_raw(session)
        xinc, x0, y_scale, y_offset = (float(v) for v in _ask(session, "REC:SCAL? 3").split(b","))
        codes = np.frombuffer(_block(_ask(session, "REC:CODE? 3")), dtype=dtype)
        records[fmt] = codes * y_scale + y_offset
        assert codes.size == int(_ask(session, "REC:LEN? 3")) == 1000
        assert xinc == pytest.approx(5e-6)
        assert -200 * xinc - 1e-12 <= x0 < -199 * xinc  # the trigger falls within a sample of 200
        t = x0 + xinc * np.arange(codes.size)
        monitor = records[fmt]
        # pump monitor: 0.1 V/W x 6.93 W during the pulse, 0 before it (bench file)
        step = 1.25 / (127 if fmt == "I8" else 32767)
        during = (t > 10e-6) & (t < WIDTH - 10e-6)
        assert np.mean(monitor[during]) == pytest.approx(0.1 * 6.93, abs=max(2e-3, step))
        assert abs(np.mean(monitor[t < 0])) < max(2e-3, step)
    assert np.max(np.abs(records["I8"] - records["I16"])) < 0.05  # int8's coarser step, 10 mV


def test_averaging_lowers_the_scatter_by_the_square_root_of_the_triggers(cfg):
    with SimulatedBench(cfg, speed=4.0) as sim:
        scope = open_instrument("detector", "scope", sim.resources["detector"], "generic-scope", 2.0, {})
        pump = open_instrument("pump", "pump-driver", sim.resources["pump"], "generic-pump", 1.0, {})
        pump.set_current(CURRENT)
        pump.set_pulsing(WIDTH, PERIOD)
        pump.output(True)
        time.sleep(0.05)
        spread = {}
        for n in (1, 16):
            scope.set_averages(n)
            acq = scope.acquire()
            probe = acq["probe"]
            before = probe.volts[probe.times < 0]
            # the unpumped probe level: probe_signal + dark_probe (bench file), drift under 1 %
            assert np.mean(before) == pytest.approx(0.8 + 3e-3, rel=0.01)
            spread[n] = float(np.std(np.diff(before)))  # successive differences: no drift
        assert spread[1] / spread[16] == pytest.approx(4.0, rel=0.3)
        truth = scope.sim_truth()
        assert truth["pulses"] > 10 and truth["tau"] == pytest.approx(0.6e-3)
        pump.output(False)
