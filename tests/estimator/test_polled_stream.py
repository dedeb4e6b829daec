"""The estimator on a polled stream: one-sample blocks (``dt = 0``) at irregular times, as a
meter gives them.

The readings are made here (a steady pumped transmission with white noise, at jittered poll
times); the references are numpy on those same readings, by the rule the watch mode states:
ln R = ln(mean S of the pump-on readings after the settle time / S_off), its noise part the
scatter of the batch means over sqrt(k) (Flyvbjerg and Petersen, J. Chem. Phys. 91, 461
(1989); each time batch holds at most one reading here, so that is the readings' standard
deviation over sqrt(k)) added in quadrature to the baseline's relative error. Windows are
spans of time: a window estimate holds the readings whose times fall inside it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.config import load_bench
from bench.estimator import Baseline, EstimatorParams, new_state, report, update, with_baseline
from bench.estimator.state import POLL_TICK
from bench.records import Block

CHANNELS = ("probe", "reference", "pump_monitor", "read_spread")
REF = 0.6
S_ON = 1.62
S_OFF = 1.3
BASE = Baseline(S_OFF, 2e-4, 400, 0.0, -0.3)


@pytest.fixture(scope="module")
def params():
    return EstimatorParams.from_config(load_bench(), pump_threshold_v=0.25)


def poll_times(n: int, rate: float, seed: int, t0: float = 3.217) -> np.ndarray:
    """Request-reply midpoints of a software-timed poll: the nominal period plus jitter of up
    to 30 % of it, never closer than 1 ms."""
    rng = np.random.default_rng(seed)
    steps = (1.0 / rate) * (1.0 + rng.uniform(-0.3, 0.3, n))
    return t0 + np.concatenate(([0.0], np.cumsum(np.maximum(steps[1:], 1e-3))))


def readings(times: np.ndarray, seed: int, noise: float = 2e-3) -> np.ndarray:
    rng = np.random.default_rng(seed + 1)
    ref = REF * (1.0 + 0.01 * rng.standard_normal(times.size))  # source noise, common to both
    probe = S_ON * ref * (1.0 + noise * rng.standard_normal(times.size))
    monitor = np.full(times.size, 0.5)  # pump on throughout
    return np.column_stack([probe, ref, monitor, np.full(times.size, 1e-3)])


def blocks(times, data, requests=None):
    requests = range(len(times)) if requests is None else requests
    for seq, (t, row, k) in enumerate(zip(times, data, requests)):
        yield Block("detector", seq, float(t), 0.0, int(k), CHANNELS, row[None, :].copy())


def run(params, times, data, requests=None, mode="watch"):
    st = with_baseline(new_state(params, mode), BASE)
    out = []
    for b in blocks(times, data, requests):
        st, est = update(st, b)
        out.extend(est)
    return st, out


def settled_mask(params, times, restarts=(0,)):
    """Readings at least step_settle_time after the last restart (stream start, gap), on the
    1 us grid the estimator keeps time on."""
    idx = np.rint((times - times[0]) / POLL_TICK).astype(np.int64)
    settle = math.ceil(params.step_settle_time / POLL_TICK - 1e-9)
    last = np.zeros(times.size, dtype=np.int64)
    for r in restarts:
        last[r:] = idx[r]
    return idx - last >= settle


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_cumulative_figure_is_numpy_on_the_settled_readings(params, seed):
    times = poll_times(400, 20.0, seed)
    data = readings(times, seed)
    st, _ = run(params, times, data)
    (final,) = report(st)
    use = settled_mask(params, times)
    s = data[use, 0] / data[use, 1]  # no dark given: S = V_probe / V_ref
    k = s.size
    mean = s.mean()
    assert final.n_samples == k
    lnr = final.values["ln_ratio"]
    assert lnr.value == pytest.approx(math.log(mean / S_OFF), rel=1e-12)
    noise = math.hypot(np.std(s, ddof=1) / math.sqrt(k) / mean, BASE.sigma / BASE.value)
    assert lnr.sigma_noise == pytest.approx(noise, rel=1e-9)
    # and the figure is right: the generator's S_on within 4 sigma_noise
    assert abs(lnr.value - math.log(S_ON / S_OFF)) < 4 * lnr.sigma_noise


def test_windows_are_spans_of_time_holding_the_readings_inside_them(params):
    times = poll_times(300, 13.0, 7)  # a rate that does not divide the window
    data = readings(times, 7)
    _, out = run(params, times, data)
    windows = [e for e in out if e.scope == "window"]
    assert len(windows) > 10
    use = settled_mask(params, times)
    W = params.window
    for e in windows:
        # a window ends on the time grid: origin + whole windows (less one tick)
        n_w = (e.t + POLL_TICK - times[0]) / W
        assert n_w == pytest.approx(round(n_w), abs=1e-6)
        lo, hi = times[0] + (round(n_w) - 1) * W, times[0] + round(n_w) * W
        inside = use & (times >= lo) & (times < hi)
        assert e.n_samples == int(np.count_nonzero(inside)), (e.t, lo, hi)


def test_same_readings_give_the_same_estimates(params):
    times = poll_times(200, 20.0, 4)
    data = readings(times, 4)
    _, a = run(params, times, data)
    _, b = run(params, times, data)
    assert [(e.t, e.scope, e.values["ln_ratio"].value) for e in a if "ln_ratio" in e.values] == [
        (e.t, e.scope, e.values["ln_ratio"].value) for e in b if "ln_ratio" in e.values
    ]


def test_a_lost_request_is_a_gap_that_restarts_the_settle_time(params):
    times = poll_times(200, 20.0, 5)
    data = readings(times, 5)
    # the reading of request 100 never came: the next block is request 101
    keep = np.ones(times.size, dtype=bool)
    keep[100] = False
    requests = np.flatnonzero(keep)
    st, _ = run(params, times[keep], data[keep], requests=requests)
    (final,) = report(st)
    use = settled_mask(params, times[keep], restarts=(0, 100))
    assert final.n_samples == int(np.count_nonzero(use))
    # without the lost request, no restart: more readings count
    st_all, _ = run(params, times, data)
    assert report(st_all)[0].n_samples > final.n_samples


def test_a_reading_not_after_the_one_before_is_refused(params):
    times = np.array([1.0, 1.05, 1.05])
    data = readings(times, 0)
    with pytest.raises(ValueError, match="not after the reading before it"):
        run(params, times, data)


def test_a_sampled_block_in_a_polled_stream_is_refused(params):
    st = with_baseline(new_state(params, "watch"), BASE)
    st, _ = update(st, Block("detector", 0, 1.0, 0.0, 0, CHANNELS, readings(np.array([1.0]), 0)))
    two = Block("detector", 1, 1.1, 1e-3, 1, CHANNELS, readings(np.array([1.1, 1.101]), 0))
    with pytest.raises(ValueError, match="this stream is polled"):
        update(st, two)


@pytest.mark.parametrize("mode", ["chopped", "decay", "sweep"])
def test_modes_that_need_a_sample_interval_refuse_a_polled_stream(params, mode):
    st = new_state(params, mode)
    with pytest.raises(ValueError, match=rf"polled reading .* {mode} mode needs sampled data.*watch"):
        update(st, Block("detector", 0, 1.0, 0.0, 0, CHANNELS, readings(np.array([1.0]), 0)))
