"""Pulsed mode on shots made by a generator written here (numpy), not by the simulator.

Each shot is the record a triggered scope gives of one rectangular pump pulse: the probe
transmission ``exp(ln R(t))`` with ``ln R`` rising during the pulse and falling as
``ln R_peak exp(-(t - w) / tau_d)`` after it (the rate equation's solution, Koechner,
Solid-State Laser Engineering, sec. 1.4), white noise on the probe. The estimate must lie
within 4 sigma_noise of the generator's peak and decay time, and its sigma must be honest:
over independent sets of shots the pulls (estimate - truth) / sigma_noise scatter with a
standard deviation near 1 (common practice, no source).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from bench import estimator as est
from bench.config import load_bench
from bench.estimator.params import EstimatorParams
from bench.records import PROBE, PUMP_MONITOR, REFERENCE, TRIGGER_TIME, Block

BENCH = Path(__file__).resolve().parents[2] / "bench" / "data" / "demo_pulsed_bench.toml"
WIDTH, PERIOD, DX, N, PRE = 0.5e-3, 10e-3, 5e-6, 1000, 200
PEAK, RISE, DECAY = 0.03, 0.35e-3, 0.6e-3
NOISE = 1e-3  # relative, per sample


@pytest.fixture(scope="module")
def params():
    return EstimatorParams.from_config(load_bench(BENCH))


def shots(rng, n, *, first=0):
    tt = (np.arange(N) - PRE) * DX
    lnr = np.where(
        tt < 0,
        0.0,
        np.where(
            tt < WIDTH,
            PEAK * np.expm1(-tt / RISE) / math.expm1(-WIDTH / RISE),
            PEAK * np.exp(-(tt - WIDTH) / DECAY),
        ),
    )
    monitor = np.where((tt >= 0) & (tt < WIDTH), 0.7, 0.0)
    for k in range(first, first + n):
        probe = 0.8 * np.exp(lnr) * (1 + NOISE * rng.standard_normal(N))
        data = np.column_stack([probe, np.full(N, 0.6), monitor, tt])
        yield Block(
            "detector", k, k * PERIOD + tt[0], DX, k * N, (PROBE, REFERENCE, PUMP_MONITOR, TRIGGER_TIME), data
        )


def run(params, blocks):
    state = est.new_state(
        params, "pulsed", {"pulse_width": WIDTH, "pulse_period": PERIOD, "pump_power": 6.93}
    )
    for b in blocks:
        state, _ = est.update(state, b)
    (final,) = est.report(state)
    return final


def test_peak_and_decay_time_within_4_sigma_noise_of_the_generator(params):
    final = run(params, shots(np.random.default_rng(1), 50))
    assert final.extra["shots"] == 50
    lnr, decay = final.values["ln_ratio"], final.values["decay_time_s"]
    assert abs(lnr.value - PEAK) < 4 * lnr.sigma_noise, lnr
    assert abs(decay.value - DECAY) < 4 * decay.sigma_noise, decay
    # the transient is the generator's ln R, averaged (its peak sample near the pulse end)
    tr = final.extra["transient"]
    i = int(np.argmax(tr["ln_ratio"]))
    assert tr["t_s"][i] == pytest.approx(WIDTH, abs=5 * DX * 5)
    # the transmission before the pulse: 0.8 V / 0.6 V, no dark (none was given)
    assert final.values["transmission_before"].value == pytest.approx(0.8 / 0.6, rel=1e-3)
    assert "no_dark" in final.flags


@pytest.mark.slow
def test_the_noise_sigma_is_honest_over_independent_sets_of_shots(params):
    pulls = {"ln_ratio": [], "decay_time_s": []}
    rng = np.random.default_rng(7)
    for _ in range(40):
        final = run(params, shots(rng, 12))
        for key, truth in (("ln_ratio", PEAK), ("decay_time_s", DECAY)):
            q = final.values[key]
            pulls[key].append((q.value - truth) / q.sigma_noise)
    for key, p in pulls.items():
        assert 0.7 < float(np.std(p)) < 1.4, (key, np.std(p))
        assert abs(float(np.mean(p))) < 3 / math.sqrt(len(p)) + 0.3, (key, np.mean(p))


def test_shots_without_a_pump_pulse_are_left_out(params):
    rng = np.random.default_rng(3)
    dark_shots = []
    for b in shots(rng, 5):
        data = b.data.copy()
        data[:, 2] = 0.0  # the pump monitor: no pulse (before the guard emits)
        data[:, 0] = 0.8
        dark_shots.append(Block(b.source, b.seq, b.t0, b.dt, b.first_index, b.channels, data))
    final = run(params, [*dark_shots, *shots(rng, 10, first=5)])
    assert final.extra["shots"] == 10
