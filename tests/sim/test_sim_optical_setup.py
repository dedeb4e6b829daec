"""The whole simulated bench used directly (no sockets): pump driver, shutters, truth, faults.

Sources: rate-equation decay N2(t) = N2(0) exp(-t/tau) and ln R = (sigma_e + sigma_a) L <N2>
(O. Svelto, *Principles of Lasers*, 5th ed., 2010, sec. 7.3); first-order thermal response
T(t) = T_target + (T0 - T_target) exp(-t/tau_th) (Newton's law of cooling, common practice);
the driver's behaviour (20 ms ramp, interlock, 45 degC trip) is the simulator's own contract,
simulated_instruments/COMMANDS.md.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.config import load_bench
from simulated_instruments.device_errors import DeviceError
from simulated_instruments.diode_driver_model import TRIP_TEMPERATURE
from simulated_instruments.faults import Fault
from simulated_instruments.optical_setup import BenchModel
from simulated_instruments.setup_config import SimulatorSetupError

CFG = load_bench()


def model(**kw) -> BenchModel:
    return BenchModel(CFG, **kw)


def test_same_seed_same_data_any_blocking():
    a = model(seed=11, sample_rate=200e3)
    b = model(seed=11, sample_rate=200e3)
    for m in (a, b):
        m.set_pump(current=6.0, on=True)
        m.set_modulation(330.0)
    whole, first = a.generate(30000)
    parts = []
    for n in (1, 999, 7000, 12000, 10000):
        block, i0 = b.generate(n)
        assert i0 == sum(p.shape[0] for p in parts)
        parts.append(block)
    assert first == 0
    np.testing.assert_array_equal(np.concatenate(parts), whole)
    c = model(seed=12, sample_rate=200e3)
    c.set_pump(current=6.0, on=True)
    c.set_modulation(330.0)
    assert not np.array_equal(c.generate(30000)[0], whole)


def test_sample_indices_and_skipping():
    m = model(sample_rate=1000.0)
    _, i0 = m.generate(10)
    assert i0 == 0 and m.t == pytest.approx(0.010)
    m.advance_to(0.0505)
    _, i0 = m.generate(1)
    assert i0 == 51  # sets 10..50 fell before t = 0.0505 s and were skipped
    m.skip(4)
    assert m.generate(1)[1] == 56
    m.stop_acquisition()
    with pytest.raises(ValueError, match="acquisition"):
        m.generate(1)
    m.start_acquisition(500.0)
    assert m.generate(2)[1] == 0 and m.acquisition_start == pytest.approx(0.057)
    with pytest.raises(ValueError, match="n_sets"):
        m.generate(-1)


def test_needs_a_simulation_table():
    text = CFG.text.replace("simulated = true", "simulated = false")
    text = text[: text.index("[simulation]")]
    text = text.replace('resource = "simulated"', 'resource = "TCPIP::10.0.0.5::5025::SOCKET"')
    from bench.config import load_bench_text

    real = load_bench_text(text, "real.toml")
    with pytest.raises(SimulatorSetupError, match="real.toml.*simulation"):
        BenchModel(real)


def test_pump_ramp_and_instant_off():
    # QP-40 contract: linear ramp to the setpoint in 20 ms; off at once
    m = model()
    m.set_pump(current=8.0, on=True)
    m.advance_to(m.t + 0.010)
    assert m.pump_current() == pytest.approx(4.0, rel=1e-9)
    m.advance_to(m.t + 0.010)
    assert m.pump_current() == pytest.approx(8.0)
    assert m.pump_optical_power() == pytest.approx(CFG.pump.power_at(8.0))
    m.set_pump(current=4.0)
    m.advance_to(m.t + 0.005)
    assert m.pump_current() == pytest.approx(7.0, rel=1e-9)
    m.set_pump(on=False)
    assert m.pump_current() == 0.0 and not m.pump_output_on
    assert m.truth()["pump_w"] == 0.0


def test_below_threshold_no_pump_light():
    # diode calibration of the bench file: P = slope (I - I_th), 0 below threshold
    m = model()
    m.set_pump(current=0.5 * CFG.pump.threshold_current, on=True)
    m.advance_to(0.1)
    assert m.truth()["pump_w"] == 0.0
    assert m.medium_regime == "steady"


def test_setpoint_and_limit():
    m = model()
    with pytest.raises(DeviceError) as err:
        m.set_pump(current=CFG.pump.diode_current_rating + 0.1)
    assert err.value.code == -222
    m.set_pump(current=5.0)
    m.set_pump(limit=3.0)
    assert m.pump.setpoint == 3.0
    with pytest.raises(DeviceError):
        m.set_pump(limit=41.0)


def test_interlock_trips_and_blocks():
    # COMMANDS.md: opening the interlock switches the output off and pushes 201; OUTP ON is
    # then refused with 201; closing it does not switch the output back on
    m = model()
    m.set_pump(current=5.0, on=True)
    m.schedule(Fault("interlock", "pump", 0.05, 0.05))
    m.advance_to(0.049)
    assert m.pump_output_on
    m.advance_to(0.051)
    assert not m.pump_output_on and not m.pump.interlock_closed
    assert m.pop_device_errors() == [("pump", 201)]
    with pytest.raises(DeviceError) as err:
        m.set_pump(on=True)
    assert err.value.code == 201
    m.advance_to(0.11)
    assert m.pump.interlock_closed and not m.pump_output_on
    m.set_pump(on=True)
    assert m.pump_output_on


def test_interlock_cuts_the_pump_at_the_exact_sample():
    m = model(sample_rate=100e3)
    m.set_pump(current=5.0, on=True)
    m.schedule(Fault("interlock", "pump", 0.05))
    data, _, truth = m.generate_with_truth(10000)
    t = truth.t
    assert np.all(truth.pump_w[(t > 0.021) & (t < 0.05)] > 4.0)
    assert np.all(truth.pump_w[t >= 0.05] == 0.0)
    monitor = data[:, 2]
    assert monitor[(t > 0.03) & (t < 0.05)].mean() > 0.4
    assert abs(monitor[t > 0.0501].mean()) < 1e-3


def test_over_temperature_trip_time_is_first_order():
    # Newton's law: from a mount settled at its setpoint, T(t) = T_set + h I (1 - exp(-t/tau));
    # the driver trips when it crosses 45 degC
    sim = CFG.simulation
    m = model()
    setpoint = 273.15 + 40.0
    m.set_mount_setpoint(setpoint)
    m.advance_to(30 * sim.thermal_time_constant)  # settle at the setpoint
    t_on = m.t
    m.set_pump(current=9.0, on=True)
    rise = sim.mount_heating * 9.0
    expected = sim.thermal_time_constant * math.log(rise / (setpoint + rise - TRIP_TEMPERATURE))
    m.advance_to(t_on + expected - 0.1)
    assert m.pump_output_on
    # (the 20 ms soft start delays the heating by about 10 ms)
    m.advance_to(t_on + expected + 0.05)
    assert not m.pump_output_on
    assert ("pump", 202) in m.pop_device_errors()
    # it switched off at 45 degC and the mount now cools
    assert m.mount_temperature() == pytest.approx(TRIP_TEMPERATURE, abs=0.02)
    assert m.mount_temperature() < TRIP_TEMPERATURE


def test_mount_temperature_follows_current():
    sim = CFG.simulation
    m = model()
    m.set_pump(current=5.0, on=True)
    m.advance_to(sim.thermal_time_constant)
    rise = sim.mount_heating * 5.0
    assert m.mount_temperature() == pytest.approx(
        sim.ambient_temperature + rise * (1 - math.exp(-1)), abs=0.01
    )
    m.set_modulation(100.0)  # half the mean current
    m.advance_to(m.t + 30 * sim.thermal_time_constant)
    assert m.mount_temperature() == pytest.approx(sim.ambient_temperature + rise / 2, abs=1e-3)


def test_overtemp_fault_trips_and_recovers():
    m = model()
    m.set_pump(current=5.0, on=True)
    m.schedule(Fault("overtemp", "pump", 0.5, 1.0))
    m.advance_to(0.6)
    assert not m.pump_output_on
    assert m.mount_temperature() > TRIP_TEMPERATURE
    assert m.pop_device_errors() == [("pump", 202)]
    m.advance_to(1.6)
    with pytest.raises(DeviceError):
        m.set_pump(on=True)  # still above 45 degC just after the TEC recovers
    m.advance_to(10.0)
    m.set_pump(on=True)
    assert m.pump_output_on


def test_modulation_square_wave_on_the_monitor():
    # 50 % duty square wave at the set frequency (QP-40 contract)
    m = model(sample_rate=100e3)
    m.set_pump(current=5.0, on=True)
    m.generate(3000)  # past the ramp
    m.set_modulation(1000.0)
    data, _ = m.generate(50000)
    high = data[:, 2] > 0.5 * CFG.simulation.pump_monitor_per_watt * CFG.pump.power_at(5.0)
    assert high.mean() == pytest.approx(0.5, abs=0.002)
    rising = np.count_nonzero(np.diff(high.astype(int)) == 1)
    assert rising in (499, 500)


def test_pump_shutter_blocks_the_pump():
    m = model()
    m.set_pump(current=7.0, on=True)
    m.set_shutter("pump", open=False)
    m.advance_to(0.1)
    tr = m.truth()
    assert tr["pump_w"] == 0.0
    assert tr["ln_ratio"] == pytest.approx(0.0, abs=1e-9)
    assert not m.shutter_open(2)
    m.set_shutter("pump", chop_hz=50.0)
    assert m.shutter_open("pump")
    with pytest.raises(ValueError, match="chop_hz"):
        m.set_shutter(2, chop_hz=500.0)
    with pytest.raises(ValueError, match="shutter"):
        m.set_shutter(3)


def test_measured_ratio_matches_true_ln_ratio():
    # ln R = ln(S_on / S_off), S = (V_probe - dark) / (V_ref - dark) (the design's definition)
    m = model(sample_rate=100e3, voltage_range=2.0)
    sim = CFG.simulation
    off, _ = m.generate(50000)
    m.set_pump(current=6.0, on=True)
    m.generate(5000)
    on, _ = m.generate(50000)

    def s(d):
        return (d[:, 0].mean() - sim.dark_probe) / (d[:, 1].mean() - sim.dark_reference)

    measured = math.log(s(on) / s(off))
    true = m.truth()["ln_ratio"]
    assert true > 0.3
    assert measured == pytest.approx(true, abs=2e-4)


def test_ln_ratio_decays_with_the_lifetime():
    # after the pump switches off, ln R(t) = ln R(0) exp(-t/tau) (Svelto sec. 7.3); the probe's
    # own stimulated rate adds (sigma_as + sigma_es) Phi_s ~ 1.5/s to 1/tau ~ 1667/s
    m = model(sample_rate=1e6)
    m.set_pump(current=8.0, on=True)
    m.advance_to(0.05)
    m.set_pump(on=False)
    _, _, truth = m.generate_with_truth(3000)
    slope, _ = np.polyfit(truth.t - truth.t[0], np.log(truth.ln_ratio), 1)
    assert -1 / slope == pytest.approx(CFG.sample.upper_state_lifetime, rel=2e-3)


def test_truth_fields():
    m = model()
    m.set_pump(current=5.0, on=True)
    m.advance_to(0.1)
    tr = m.truth()
    s = CFG.sample
    assert set(tr) == {
        "t",
        "n2_avg",
        "beta",
        "tau",
        "pump_w",
        "ln_ratio",
        "n_total",
        "length",
        "ln_t_pumped",
        "ln_t_unpumped",
        "gain_per_m",
        "n2_probe_only",
        "inputs_steady_s",
        "probe_wavelength",
        "sigma_a",
        "sigma_e",
    }
    assert tr["t"] == pytest.approx(0.1)
    assert tr["beta"] == pytest.approx(tr["n2_avg"] / s.n_total)
    assert tr["tau"] == s.upper_state_lifetime and tr["length"] == s.length
    assert tr["pump_w"] == pytest.approx(CFG.pump.power_at(5.0))
    sigma = s.sigma.probe_emission + s.sigma.probe_absorption
    # the baseline state: the probe alone, N2 = sigma_as Phi_s N / ((sigma_as + sigma_es) Phi_s + 1/tau)
    n2_off = m.n2_probe_only
    assert 0 < n2_off < 1e-3 * s.n_total
    assert tr["ln_ratio"] == pytest.approx(sigma * s.length * (tr["n2_avg"] - n2_off), rel=1e-12)
    # Beer-Lambert slice by slice: ln T = sum_i (sigma_e N2_i - sigma_a N1_i) dz (Svelto sec. 2.4)
    slices = m.slice_densities()
    dz = s.length / slices.size
    se, sa = s.sigma.probe_emission, s.sigma.probe_absorption
    assert tr["ln_t_pumped"] == pytest.approx(
        float(np.sum(se * slices - sa * (s.n_total - slices)) * dz), rel=1e-12
    )
    assert tr["ln_t_unpumped"] == pytest.approx(
        (se * n2_off - sa * (s.n_total - n2_off)) * s.length, rel=1e-12
    )
    assert tr["ln_ratio"] == pytest.approx(tr["ln_t_pumped"] - tr["ln_t_unpumped"], rel=1e-9)
    assert tr["gain_per_m"] == pytest.approx(tr["ln_t_pumped"] / s.length, rel=1e-12)
    assert tr["n2_probe_only"] == n2_off
    assert m.medium_regime == "steady"


def test_truth_says_how_long_the_inputs_have_been_steady():
    # the contract's 20 ms ramp and 50 % square wave (COMMANDS.md); edges read off the monitor
    m = model(sample_rate=100e3)
    m.set_pump(current=5.0, on=True)
    m.advance_to(0.010)
    assert m.truth()["inputs_steady_s"] == 0.0  # ramping
    m.advance_to(0.100)
    assert m.truth()["inputs_steady_s"] == pytest.approx(0.080, abs=1e-9)  # since the ramp's end
    m.set_modulation(100.0)
    t_set = m.t
    data, i0 = m.generate(int(0.0373 * 100e3))
    monitor = data[:, 2]
    high = monitor > 0.5 * monitor.max()
    last_edge = (i0 + np.flatnonzero(np.diff(high.astype(int)) != 0)[-1] + 1) / 100e3
    steady = m.truth()["inputs_steady_s"]
    assert steady == pytest.approx(m.t - last_edge, abs=1.5e-5)  # within a sample or so
    assert 0 < steady < 0.005 and m.t - t_set > 0.035


def test_tunable_probe_wavelength():
    m = model()
    lo, hi = m.wavelength_range()
    assert lo < CFG.probe.wavelength < hi
    with pytest.raises(DeviceError) as err:
        m.set_probe_wavelength(hi + 1e-9)
    assert err.value.code == -222
    m.set_pump(current=6.0, on=True)
    m.advance_to(0.1)
    at_config = m.truth()["ln_ratio"]
    m.set_probe_wavelength(hi)
    assert not m.wavelength_settled()
    m.advance_to(m.t + 0.06)
    assert m.wavelength_settled()
    assert m.truth()["ln_ratio"] != pytest.approx(at_config, rel=1e-3)
    m.set_probe_wavelength(CFG.probe.wavelength)
    m.advance_to(m.t + 0.1)
    assert m.truth()["ln_ratio"] == pytest.approx(at_config, rel=1e-6)
