"""The consumer's end of a sweep: the open step becomes the last point, and a setting change is
applied where the data reach it, not earlier when the consumer is behind.

Synthetic bench (common practice, no source): a reference of 0.6 V, a probe of S x 0.6 V with
S = S_off exp(ln R) and white noise of 0.06 % of the reference per sample, a pump monitor of
0.5 V while the pump is on. Each pump step holds one known ln R.
"""

from __future__ import annotations

import numpy as np
import pytest

import bench.estimator as est
from bench.config import load_bench
from bench.records import Block
from bench.run.consumer import Consumer, Control

RATE = 20e3
DT = 1.0 / RATE
S_OFF = 1.3
CHANNELS = ("probe", "reference", "pump_monitor")


@pytest.fixture(scope="module")
def params():
    return est.EstimatorParams.from_config(load_bench(), pump_threshold_v=0.25)


def _consumer(params) -> Consumer:
    c = Consumer(params, "sweep", traces=False)
    c.state = est.with_baseline(
        est.with_dark(c.state, est.Dark(0.0, 0.0, 0.0, 0.0, 1000, 0.0)),
        est.Baseline(S_OFF, 1e-7, 10_000, 0.0, -0.1),
    )
    return c


def _blocks(levels, n_step, rng, size=1000):
    """Detector blocks: ``n_step`` samples at each ln R of ``levels``, in blocks of ``size``."""
    lnr = np.repeat(np.asarray(levels, float), n_step)
    ref = np.full(lnr.size, 0.6) + 3.6e-4 * rng.standard_normal(lnr.size)
    probe = S_OFF * np.exp(lnr) * 0.6 + 3.6e-4 * rng.standard_normal(lnr.size)
    data = np.column_stack([probe, ref, np.full(lnr.size, 0.5)])
    return [
        Block("detector", k // size, k * DT, DT, k, CHANNELS, data[k : k + size])
        for k in range(0, lnr.size, size)
    ]


def _setting(t, current, params):
    return Control("setting", t, {"pump_current": current, "pump_power": params.pump_power_at(current)})


def test_the_last_step_is_closed_when_the_stream_ends(params):
    levels = [0.1, 0.25, 0.4]
    n_step = 8000
    blocks = _blocks(levels, n_step, np.random.default_rng(1))
    c = _consumer(params)
    per = n_step // 1000
    for k, b in enumerate(blocks):
        if k % per == 0:
            c.apply(_setting(b.t0, 2.0 + k // per, params))
        c.process(b)
    (final,) = c.finish()
    points = final.extra["points"]
    assert len(points) == len(levels)  # as many points as steps, the last one included
    assert final.extra["final"] is True
    for pt, truth in zip(points, levels):
        assert abs(pt["ln_ratio"] - truth) < 4 * pt["ln_ratio_sigma"]


def test_a_setting_waits_for_the_data_to_reach_it(params):
    # the consumer is 0.2 s behind: the second step's setting arrives while the data of the
    # first step's last 0.2 s are still queued
    levels = [0.1, 0.4]
    n_step = 10_000  # 0.5 s per step
    blocks = _blocks(levels, n_step, np.random.default_rng(2))
    c = _consumer(params)
    c.apply(_setting(0.0, 2.0, params))
    t_change = n_step * DT
    backlog = int(0.2 / (1000 * DT))
    first = n_step // 1000
    for k, b in enumerate(blocks):
        if k == first - backlog:
            c.apply(_setting(t_change, 4.0, params))  # made at t_change, seen 0.2 s of data early
        c.process(b)
    (final,) = c.finish()
    points = final.extra["points"]
    assert len(points) == 2
    for pt, truth in zip(points, levels):
        assert abs(pt["ln_ratio"] - truth) < 4 * pt["ln_ratio_sigma"], (pt, truth)
    assert points[1]["t_start"] >= t_change
    assert points[0]["t_end"] < t_change


@pytest.mark.parametrize("size", [700, 1000, 1900])
def test_a_step_settles_from_the_time_of_its_setting_however_the_data_are_blocked(params, size):
    # the driver ramps the current for 20 ms after the setting (the simulated driver's soft
    # start); the step must wait its settle time from the setting itself, not from the start of
    # the block that holds it (blocks of 35 ... 95 ms here)
    n_step = 10_000
    t_change = n_step * DT + 0.0123  # inside a block, whatever the block size
    i_change = int(round(t_change / DT))
    lnr = np.full(2 * n_step + 1000, 0.1)
    ramp = np.arange(lnr.size - i_change) * DT / 0.02
    lnr[i_change:] = 0.1 + 0.3 * np.minimum(ramp, 1.0)
    rng = np.random.default_rng(5)
    ref = 0.6 + 3.6e-4 * rng.standard_normal(lnr.size)
    probe = S_OFF * np.exp(lnr) * 0.6 + 3.6e-4 * rng.standard_normal(lnr.size)
    data = np.column_stack([probe, ref, np.full(lnr.size, 0.5)])
    blocks = [
        Block("detector", k // size, k * DT, DT, k, CHANNELS, data[k : k + size])
        for k in range(0, lnr.size, size)
    ]
    c = _consumer(params)
    c.apply(_setting(0.0, 2.0, params))
    told = False
    for b in blocks:
        if not told and b.t_end >= t_change - 0.3:
            c.apply(_setting(t_change, 4.0, params))  # the consumer sees it 0.3 s of data early
            told = True
        c.process(b)
    (final,) = c.finish()
    first, second = final.extra["points"]
    assert abs(second["ln_ratio"] - 0.4) < 4 * second["ln_ratio_sigma"], second
    # no ramp inside the step: its batches scatter as little as the first step's
    assert second["ln_ratio_sigma"] < 2 * first["ln_ratio_sigma"], (first, second)
    assert second["t_start"] == pytest.approx(t_change + params.step_settle_time, abs=DT)
