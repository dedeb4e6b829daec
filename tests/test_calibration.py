"""Calibrated uncertainty: over many simulated runs the +/-2 sigma intervals hold the truth.

Each run draws the sample's TRUE parameters (length, density, all four cross-sections,
lifetime) from normal distributions with the bench file's configured standard uncertainties,
simulates that sample (simulated_instruments.bench_model.BenchModel, no sockets, 20 kHz, a
fraction of a second), and scores the estimator, which is given the NOMINAL bench file, against
the simulator's truth. So the systematic part of each sigma is tested as honestly as the noise
part.

Expectation (the standard normal distribution, common practice for calibrated intervals): a
+/-2 sigma interval holds the truth in 95.4 % of runs. Over 200 runs the binomial standard
deviation of that fraction is 1.5 %, hence the accepted band 90-98 %; the mean of
z = (estimate - truth) / sigma has a standard error of 0.07, hence |mean z| < 0.5 leaves room
for the skew of the ratio of products that a relative systematic error gives.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from bench.config import load_bench
from bench.estimate import EstimatorParams, capture_baseline, capture_dark, new_state, report, update, with_baseline, with_dark
from bench.records import Block

BenchModel = pytest.importorskip("simulated_instruments.bench_model").BenchModel

CHANNELS = ("probe", "reference", "pump_monitor")
RATE = 20e3  # Hz
SECONDS = 0.3  # s of data behind each estimate
CURRENT = 5.0  # A
MODULATION = 50.0  # Hz, for the decays


def _true_config(cfg, rng):
    """A copy of the bench with the sample's parameters drawn from their configured uncertainty."""
    s, u, sg = cfg.sample, cfg.sample.uncertainty, cfg.sample.sigma
    z = rng.standard_normal(7)
    cs = u.cross_sections
    sigma = dataclasses.replace(
        sg,
        probe_emission=sg.probe_emission * (1 + cs * z[0]),
        probe_absorption=sg.probe_absorption * (1 + cs * z[1]),
        pump_absorption=sg.pump_absorption * (1 + cs * z[2]),
        pump_emission=sg.pump_emission * (1 + cs * z[3]),
    )
    sample = dataclasses.replace(
        s,
        length=s.length + u.length * z[4],
        n_total=s.n_total * (1 + u.n_total * z[5]),
        upper_state_lifetime=s.upper_state_lifetime * (1 + u.upper_state_lifetime * z[6]),
        sigma=sigma,
    )
    return dataclasses.replace(cfg, sample=sample)


def _blocks(model, n, size=2000):
    while n > 0:
        k = min(n, size)
        data, first = model.generate(k)
        yield Block("detector", first // size, model.acquisition_start + first / model.sample_rate,
                    1.0 / model.sample_rate, first, CHANNELS, data)
        n -= k


def _one_run(cfg, params, seed, mode):
    """(estimate Quantity, truth) of beta (watch) or tau (decay) for one simulated sample."""
    true_cfg = _true_config(cfg, np.random.default_rng(seed))
    model = BenchModel(true_cfg, seed=seed, sample_rate=RATE)
    model.set_shutter("probe", False)
    dark = capture_dark(_blocks(model, 1000))
    model.set_shutter("probe", True)
    baseline = capture_baseline(_blocks(model, 2000), dark)
    model.set_pump(current=CURRENT, on=True)
    if mode == "decay":
        model.advance_to(model.t + 0.025)  # past the driver's 20 ms soft start
        model.set_modulation(MODULATION)
    state = with_baseline(with_dark(new_state(params, mode, {"pump_current": CURRENT}), dark), baseline)
    for block in _blocks(model, int(SECONDS * RATE)):
        state, _ = update(state, block)
    (final,) = report(state)
    if mode == "watch":
        return final.values["beta"], model.truth()["beta"]
    return final.values["tau_s"], true_cfg.sample.upper_state_lifetime


def _scores(mode, n_runs, first_seed):
    cfg = load_bench()
    params = EstimatorParams.from_config(cfg)
    z = []
    for k in range(n_runs):
        q, truth = _one_run(cfg, params, first_seed + k, mode)
        assert math.isfinite(q.value) and q.sigma > 0
        z.append((q.value - truth) / q.sigma)
    z = np.array(z)
    return float(np.mean(np.abs(z) < 2.0)), float(np.mean(z))


@pytest.mark.slow
@pytest.mark.parametrize("mode", ["watch", "decay"])
def test_two_sigma_intervals_hold_the_truth_over_200_runs(mode):
    coverage, bias = _scores(mode, 200, first_seed=1000)
    assert 0.90 <= coverage <= 0.98, f"{mode}: +/-2 sigma held the truth in {coverage:.1%} of runs"
    assert abs(bias) < 0.5, f"{mode}: mean (estimate - truth) / sigma = {bias:.2f}"


@pytest.mark.parametrize("mode", ["watch", "decay"])
def test_two_sigma_intervals_hold_the_truth_over_30_runs(mode):
    # 30 runs: the coverage fraction has a binomial sigma of 3.8 % and the mean z a standard
    # error of 0.18, so the band is widened to 80-100 % and |mean z| < 0.6 (about 3 standard
    # errors). It still fails for a sigma half the right size (coverage near 68 %) or a bias
    # of one sigma.
    coverage, bias = _scores(mode, 30, first_seed=5000)
    assert 0.80 <= coverage <= 1.0, f"{mode}: +/-2 sigma held the truth in {coverage:.1%} of runs"
    assert abs(bias) < 0.6, f"{mode}: mean (estimate - truth) / sigma = {bias:.2f}"
