"""Timing of chopped and decay runs: the pumped rise rate, the settle windows, the default
periods, and the refusal before a run of a period that leaves no settled data.

The rise rate is checked against the rate equations written out here by hand with CODATA
constants (scipy.constants) and Beer-Lambert absorption (O. Svelto, *Principles of Lasers*,
5th ed., 2010, sec. 2.4 and ch. 7), and against the simulated medium's own response
(simulated_instruments.medium: the slowest-rising slice of a thick sample, exact per step).
"""

from __future__ import annotations

import math
import subprocess
import sys
import time

import numpy as np
import pytest
from scipy import constants

from bench.errors import GainbenchError
from bench.estimator.timing import TimingError, check_timing, default_period, nice_ceil, run_period
from bench.run.pump_program import chop_frequency, default_current


def test_rise_rate_is_the_rate_equation_relaxation_rate_at_the_back_face(cfg, params):
    s, pump = cfg.sample, cfg.pump
    power = pump.power_at(default_current(cfg))
    w = pump.beam_diameter / 2
    photon = constants.h * constants.c / pump.wavelength  # CODATA via scipy
    intensity_back = power / (math.pi * w * w) * math.exp(-s.sigma.pump_absorption * s.n_total * s.length)
    w_p = (s.sigma.pump_absorption + s.sigma.pump_emission) * intensity_back / photon
    w_s = (
        (s.sigma.probe_emission + s.sigma.probe_absorption)
        * cfg.probe.power
        / (math.pi * (cfg.probe.beam_diameter / 2) ** 2)
        / (constants.h * constants.c / cfg.probe.wavelength)
    )
    expected = w_p + w_s + 1 / s.upper_state_lifetime
    assert params.rise_rate(power) == pytest.approx(expected, rel=1e-9)
    assert params.rise_rate(None) == pytest.approx(w_s + 1 / s.upper_state_lifetime, rel=1e-9)
    # the settle window: the deficit exp(-k t) falls to 1e-5 (the documented rule)
    assert math.exp(-expected * params.rise_settle(power)) == pytest.approx(1e-5, rel=1e-6)


def test_the_slowest_slice_of_the_simulated_medium_settles_within_the_rise_window(cfg, params):
    # The simulator's medium (its own code, exact per step, pump absorbed slice by slice): at
    # a modulation edge after a long pump-off half, every slice (the weakly pumped back one
    # included) must be within 2e-5 of its whole rise from its final level once the rise
    # settle window has passed, and still visibly short of it at a third of the window.
    from simulated_instruments.optical_setup import BenchModel

    current = default_current(cfg)
    power = cfg.pump.power_at(current)
    model = BenchModel(cfg, seed=1, sample_rate=100e3)
    model.set_pump(current=current, on=True)
    model.advance_to(model.t + 0.025)  # through the driver's 20 ms soft start
    t0 = model.t
    model.set_modulation(1.0 / 0.2)  # on until t0 + 0.1 s, off until t0 + 0.2 s, on again
    edge = t0 + 0.2
    model.advance_to(edge)
    start = model.slice_densities().copy()
    window = params.rise_settle(power)
    model.advance_to(edge + window / 3)
    early = model.slice_densities().copy()
    model.advance_to(edge + window)
    at_window = model.slice_densities().copy()
    model.advance_to(edge + 0.099)
    final = model.slice_densities().copy()
    span = np.abs(final - start)
    assert np.all(np.abs(final - at_window) <= 2e-5 * span)
    assert np.abs(final - early)[-1] > 1e-3 * span[-1]  # the window is not trivially long


def test_default_periods_hold_three_settle_windows_and_are_round(cfg, params):
    power = cfg.pump.power_at(default_current(cfg))
    chop = default_period(params, "chopped", power)
    assert chop / 2 >= 3 * max(params.rise_settle(power), params.off_settle())
    assert chop == nice_ceil(chop) and 1 / chop_frequency(cfg, "chopped") == pytest.approx(chop)
    decay = default_period(params, "decay", power)
    assert decay / 2 >= params.decay_record and decay / 2 >= 3 * params.rise_settle(power)
    check_timing(params, "chopped", chop, power)
    check_timing(params, "decay", decay, power)


@pytest.mark.parametrize(
    "x, expected",
    [(0.0414, 0.05), (0.05, 0.05), (0.0301, 0.04), (1.1e-3, 1.2e-3), (7.0, 8.0), (0.0099, 0.01)],
)
def test_nice_ceil(x, expected):
    assert nice_ceil(x) == pytest.approx(expected)


def test_a_period_with_no_settled_data_is_refused_with_the_figures(cfg, params):
    power = cfg.pump.power_at(default_current(cfg))
    with pytest.raises(TimingError) as err:
        check_timing(params, "chopped", 0.012, power)
    text = str(err.value)
    rise, off = params.rise_settle(power), params.off_settle()
    for figure in ("12 ms", "6 ms", f"{rise * 1e3:.3g} ms", f"{off * 1e3:.3g} ms", "50 ms"):
        assert figure in text, (figure, text)
    assert isinstance(err.value, GainbenchError)
    with pytest.raises(TimingError, match="decay mode.*5 ms"):
        check_timing(params, "decay", 0.005, power)
    check_timing(params, "watch", 1e-6, power)  # no modulation: nothing to check


def test_the_old_default_chopping_period_is_refused(cfg, params):
    # half-period 10 tau with a 10 tau settle window: the timing that never gave an estimate
    tau = cfg.sample.upper_state_lifetime
    with pytest.raises(TimingError):
        check_timing(params.replace(rise_settle_time=10 * tau), "chopped", 20 * tau, None)


def test_record_refuses_a_bad_period_before_any_run_file(tmp_path):
    logs = tmp_path / "logs"
    t0 = time.monotonic()
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "bench",
            "record",
            "--mode",
            "chopped",
            "--period",
            "12 ms",
            "--seconds",
            "1",
            "--logs",
            str(logs),
            "--operator",
            "t",
            "--eyewear-od",
            "940nm=5",
            "--eyewear-od",
            "1030nm=2",
            "--confirm-setup",
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    elapsed = time.monotonic() - t0
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "no settled data" in proc.stderr and "12 ms" in proc.stderr and "50 ms" in proc.stderr
    assert "run " not in proc.stdout  # no run was opened
    assert not logs.exists() or not any(logs.iterdir())
    assert elapsed < 60  # not a speed target: it must not have run the 1 s program and its captures


def test_run_period_follows_the_current(cfg):
    lo = run_period(cfg, "chopped", cfg.pump.threshold_current + 0.5)
    hi = run_period(cfg, "chopped", default_current(cfg))
    assert lo >= hi  # a weaker pump rises slower
    assert run_period(cfg, "chopped", default_current(cfg), 0.03) == 0.03


@pytest.mark.parametrize(
    "mode, period, words",
    [
        ("chopped", "0 ms", "--period: '0 ms' is not a positive time"),
        ("chopped", "fast", "--period"),
        ("chopped", "3 A", "--period"),
        ("watch", "50 ms", "--period: applies to chopped, decay, sweep and spectrum modes"),
        ("decay", "4 ms", "decay mode: a pump period of 4 ms"),
    ],
)
def test_record_period_errors_name_the_option(cfg, mode, period, words):
    import argparse

    from bench.commands import record

    args = argparse.Namespace(mode=mode, period=period)
    with pytest.raises(GainbenchError) as err:
        record._mode_period(args, cfg, default_current(cfg))
    assert words in str(err.value)
