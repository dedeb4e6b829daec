"""The pump-induced background: its capture and its subtraction, on hand-made blocks.

The expected figures are worked by hand here (a background level above the dark, mean of the
pump-on samples only; S = (V_probe - dark_p - background) / (V_ref - dark_r) on pump-on
samples, common practice, no source) and checked with numpy's own mean, not with the
estimator's expressions.
"""

from __future__ import annotations

import numpy as np
import pytest

import bench.estimator as est
from bench.estimator.state import background_volts
from bench.records import Block

CHANNELS = ("probe", "reference", "pump_monitor")
DT = 1e-5


def blocks(probe, reference, monitor, size=500):
    data = np.column_stack([probe, reference, monitor])
    return [
        Block("detector", k, i * DT, DT, i, CHANNELS, data[i : i + size])
        for k, i in enumerate(range(0, len(data), size))
    ]


def test_the_background_is_the_pump_on_probe_level_above_the_dark():
    rng = np.random.default_rng(7)
    n = 4000
    on = np.arange(n) >= 1000  # the first quarter still before the pump
    probe = 0.003 + np.where(on, 0.0054, 0.0) + rng.normal(0, 5e-4, n)
    reference = 0.002 + rng.normal(0, 5e-4, n)  # the probe blocked: the reference is dark too
    monitor = np.where(on, 0.693, 0.0) + rng.normal(0, 5e-4, n)
    dark = est.Dark(0.003, 1e-5, 0.002, 1e-5, 1000, 0.0)
    bg = est.capture_background(blocks(probe, reference, monitor), dark, pump_threshold_v=0.1)
    assert bg.n_samples == 3000
    assert bg.probe == pytest.approx(np.mean(probe[on]) - 0.003, abs=1e-12)
    assert bg.pump_monitor_v == pytest.approx(np.mean(monitor[on]), abs=1e-12)
    # the standard error of 3000 independent samples of 0.5 mV is 9.1 uV; batch means agree
    assert bg.probe_sigma == pytest.approx(5e-4 / np.sqrt(3000), rel=0.5)


def test_a_background_with_the_pump_off_or_without_a_dark_is_refused():
    n = 1000
    bl = blocks(np.full(n, 0.003), np.full(n, 0.002), np.zeros(n))
    dark = est.Dark(0.003, 1e-5, 0.002, 1e-5, 1000, 0.0)
    with pytest.raises(ValueError, match="pump off"):
        est.capture_background(bl, dark, pump_threshold_v=0.1)
    with pytest.raises(ValueError, match="capture a dark first"):
        est.capture_background(bl, None)


def test_subtracted_on_pump_on_samples_only_and_scaled_with_the_monitor():
    bg = est.Background(0.005, 1e-5, 0.7, 100, 0.0)
    on = np.array([False, True, True])
    monitor = np.array([0.0, 0.7, 0.35])
    # off: nothing; on at the measured pump level: the level; at half the monitor: half of it
    assert list(background_volts(bg, on, monitor)) == pytest.approx([0.0, 0.005, 0.0025])
    assert list(background_volts(bg, on, None)) == pytest.approx([0.0, 0.005, 0.005])
    nan_monitor = est.Background(0.005, 1e-5, float("nan"), 100, 0.0)
    assert list(background_volts(nan_monitor, on, monitor)) == pytest.approx([0.0, 0.005, 0.005])


def test_with_background_takes_only_a_background():
    from bench.config import load_bench

    params = est.EstimatorParams.from_config(load_bench())
    state = est.new_state(params, "watch", {"pump_power": 4.0})
    with pytest.raises(ValueError, match="expected Background"):
        est.with_background(state, 0.005)
    with pytest.raises(ValueError, match="t_resume"):
        est.with_background(state, est.Background(0.005, 1e-5, 0.7, 100, 0.0), t_resume=float("nan"))


def test_with_a_settle_time_only_samples_settled_after_the_pump_came_on_count():
    # a square-wave pump: 100 samples on, 100 off; the probe's background rises over the first
    # 30 samples of each on-half (a ramp), then holds 5 mV. With a settle of 40 samples' time
    # only the flat part counts: its mean is 5 mV exactly (numpy on the flat samples).
    n = 2000
    k = np.arange(n)
    on = (k // 100) % 2 == 1
    into = k % 100
    level = np.where(on, 0.005 * np.minimum(1.0, into / 30.0), 0.0)
    probe = 0.003 + level
    monitor = np.where(on, 0.7, 0.0)
    dark = est.Dark(0.003, 1e-5, 0.002, 1e-5, 1000, 0.0)
    bl = blocks(probe, np.full(n, 0.002), monitor, size=250)
    bg = est.capture_background(bl, dark, pump_threshold_v=0.35, settle_s=40 * DT)
    flat = on & (into >= 40)
    assert bg.n_samples == int(np.count_nonzero(flat))
    assert bg.probe == pytest.approx(0.005, abs=1e-12)
    without = est.capture_background(bl, dark, pump_threshold_v=0.35)
    assert without.probe == pytest.approx(float(np.mean(level[on])), abs=1e-12)  # the ramps pull it down
