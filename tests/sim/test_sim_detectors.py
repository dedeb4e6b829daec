"""Noise, drift, dark, quantisation and clipping of the simulated detectors.

Sources: ratiometric (probe/reference) detection cancels the source's intensity noise and
photodiode shot noise has a variance proportional to the photocurrent (P. C. D. Hobbs, *Building
Electro-Optical Systems*, 2nd ed., Wiley, 2009, ch. 3 and 10, from memory); uniform quantisation
adds a variance of one step squared over 12 (W. R. Bennett, "Spectra of quantized signals",
Bell Syst. Tech. J. 27 (1948) 446-472); an N-bit two's complement ADC over +/-R has steps of
2R / 2**N and reads R - 1 step at positive full scale (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.config import load_bench
from simulated_instruments.detectors import SHOT_COEFFICIENT, SourceDrift, adc
from simulated_instruments.faults import Fault
from simulated_instruments.optical_setup import BenchModel

QUIET = {"simulation.drift_per_hour": "0.0"}


def model(overrides=None, **kw) -> BenchModel:
    return BenchModel(load_bench(overrides=overrides), **kw)


def test_rin_cancels_in_the_ratio():
    # Hobbs ch. 10: noise common to probe and reference cancels in their ratio
    m = model({"simulation.relative_intensity_noise": "0.01", **QUIET}, sample_rate=100e3)
    sim = m.cfg.simulation
    data, _ = m.generate(20000)
    probe = data[:, 0] - sim.dark_probe
    ref = data[:, 1] - sim.dark_reference
    probe_noise = probe.std() / probe.mean()
    ratio = probe / ref
    ratio_noise = ratio.std() / ratio.mean()
    assert probe_noise == pytest.approx(0.01, rel=0.05)
    assert ratio_noise < 0.2 * probe_noise


def test_noise_level_amplifier_shot_and_quantisation():
    # variance = amplifier noise^2 + shot coefficient x signal (Hobbs ch. 3) + step^2/12 (Bennett)
    m = model({"simulation.relative_intensity_noise": "0.0", **QUIET}, sample_rate=100e3, voltage_range=2.0)
    sim = m.cfg.simulation
    data, _ = m.generate(60000)
    step = 2 * 2.0 / 2**sim.adc_bits
    for col, signal in ((0, sim.probe_signal), (1, sim.reference_signal)):
        want = math.sqrt(sim.detector_noise**2 + SHOT_COEFFICIENT * signal + step**2 / 12)
        assert data[:, col].std() == pytest.approx(want, rel=0.02)
    monitor_want = math.sqrt(sim.detector_noise**2 + step**2 / 12)
    assert data[:, 2].std() == pytest.approx(monitor_want, rel=0.02)


@pytest.mark.parametrize("full_scale", [1.0, 2.0, 10.0])
def test_readings_are_whole_adc_steps(full_scale):
    # two's complement ADC: every reading is a whole number of steps 2R / 2**bits
    m = model(voltage_range=full_scale)
    data, _ = m.generate(5000)
    step = 2 * full_scale / 2**m.cfg.simulation.adc_bits
    codes = data / step
    np.testing.assert_array_equal(codes, np.round(codes))
    assert np.all(np.abs(codes) <= 2 ** (m.cfg.simulation.adc_bits - 1))
    # the noise spans several codes, so steps of exactly one code occur
    diffs = np.diff(np.unique(data[:, 0]))
    assert diffs.min() == pytest.approx(step, rel=1e-9)


def test_adc_clips_at_full_scale():
    # positive full scale reads R - 1 step, negative full scale -R (two's complement)
    v = np.array([-5.0, -2.0, -1.99999, 0.0, 1.99999, 2.0, 7.0])
    out = adc(v.copy(), 2.0, 16)
    step = 4.0 / 2**16
    assert out[0] == -2.0 and out[1] == -2.0
    assert out[-1] == 2.0 - step and out[-2] == 2.0 - step
    assert out[3] == 0.0


def test_saturation_clips_and_pushes_one_error_per_episode():
    # stray light past full scale: the probe input sits at full scale; error 101 once per
    # clipping episode (simulated_instruments/COMMANDS.md)
    m = model(voltage_range=2.0, sample_rate=100e3)
    m.schedule(Fault("saturate", "detector", 0.01, 0.02))
    m.schedule(Fault("saturate", "detector", 0.06, 0.01))
    data, _ = m.generate(10000)  # 0.1 s
    t = np.arange(10000) / 100e3
    inside = ((t >= 0.01) & (t < 0.03)) | ((t >= 0.06) & (t < 0.07))
    step = 4.0 / 2**16
    assert np.all(data[inside, 0] == 2.0 - step)
    assert np.all(data[~inside, 0] < 1.0)
    errors = m.pop_device_errors()
    assert errors == [("detector", 101), ("detector", 101)]


def test_dark_with_probe_shutter_shut():
    # shutter 1 blocks the probe before the splitter: both photodiodes read their dark offset
    m = model(QUIET, sample_rate=100e3)
    sim = m.cfg.simulation
    m.set_shutter("probe", open=False)
    data, _ = m.generate(20000)
    tol = 5 * sim.detector_noise / math.sqrt(20000) + 1e-4
    assert data[:, 0].mean() == pytest.approx(sim.dark_probe, abs=tol)
    assert data[:, 1].mean() == pytest.approx(sim.dark_reference, abs=tol)
    m.set_shutter("probe", open=True)
    data, _ = m.generate(20000)
    assert data[:, 1].mean() == pytest.approx(sim.reference_signal + sim.dark_reference, rel=1e-3)


def test_pump_monitor_reads_the_delivered_power():
    # CH3 = pump_monitor_per_watt x slope (I - I_threshold) (the bench file's calibration)
    m = model(QUIET, sample_rate=100e3)
    cfg = m.cfg
    m.set_pump(current=4.0, on=True)
    m.generate(5000)  # past the 20 ms ramp
    data, _ = m.generate(20000)
    want = cfg.simulation.pump_monitor_per_watt * cfg.pump.power_at(4.0)
    assert data[:, 2].mean() == pytest.approx(want, abs=1e-4)
    m.set_shutter("pump", open=False)  # the pickoff is after the pump shutter
    data, _ = m.generate(2000)
    assert abs(data[:, 2].mean()) < 1e-4


def test_drift_is_slow_bounded_and_set_by_the_seed():
    # the common drift is of size drift_per_hour over an hour (as documented), the ratio's a
    # tenth of it
    rng = np.random.default_rng(5)
    after_an_hour = [abs(SourceDrift(0.02, rng).exact(np.array([3600.0]))[0] - 1) for _ in range(200)]
    assert 0.3 * 0.02 < np.mean(after_an_hour) < 1.2 * 0.02
    assert max(after_an_hour) < 0.02 * 2.2
    d = SourceDrift(0.02, rng)
    t = np.linspace(0, 3600, 10001)
    f = d.exact(t)
    assert f[0] == 1.0
    # smooth: its rate stays below per_hour (1/3600 + 0.6 x 2 pi / 600) per second
    assert np.max(np.abs(np.diff(f))) < 0.02 * (1 / 3600 + 0.6 * 2 * math.pi / 600) * 0.36
    # the blocked evaluation follows the exact one
    times = np.sort(rng.uniform(100, 100.2, 5000))
    np.testing.assert_allclose(d.factor(times), d.exact(times), rtol=1e-9)
    a = model(seed=3, sample_rate=10e3)
    b = model(seed=3, sample_rate=10e3)
    c = model(seed=4, sample_rate=10e3)
    for m in (a, b, c):
        m.advance_to(3600.0)
    da, db, dc = (m.generate(2000)[0] for m in (a, b, c))
    np.testing.assert_array_equal(da, db)
    assert not np.array_equal(da, dc)
    sim = a.cfg.simulation
    ratio_then = (da[:, 0].mean() - sim.dark_probe) / (da[:, 1].mean() - sim.dark_reference)
    ratio_start = sim.probe_signal / sim.reference_signal
    change = abs(ratio_then / ratio_start - 1)
    assert 1e-4 < change < 0.1 * sim.drift_per_hour * 2.2 + 1e-4
