"""The estimator's derived figures against references outside it.

* The simulated medium's own truth (BenchModel, no sockets): absolute excited fraction, the
  probe's true single-pass transmission (the net gain) and the gain coefficient.
* Python's `decimal` module (arbitrary precision) as the reference for decibels of gains far
  outside the range of a float.
* scipy.integrate.quad for the power-weighted mean intensity of a Gaussian beam
  (A. E. Siegman, *Lasers*, 1986, sec. 17.1, the Gaussian profile).
* GUM (JCGM 100:2008) sec. 5.1.3: a sensitivity coefficient may be found numerically, by
  changing one input and recomputing; the lifetime's part of the systematic uncertainty is
  checked that way.
"""

from __future__ import annotations

import math
from decimal import Decimal, getcontext

import numpy as np
import pytest
from scipy import constants, integrate
from sim_blocks import model_blocks

from bench.estimator import (
    capture_baseline,
    capture_dark,
    figures,
    new_state,
    probe_terms,
    report,
    update,
    with_baseline,
    with_dark,
)

BenchModel = pytest.importorskip("simulated_instruments.optical_setup").BenchModel

RATE = 50e3


@pytest.mark.parametrize("seed", [3, 8])
def test_watch_figures_are_those_of_the_simulated_medium(cfg, params, seed):
    # the baseline holds the excitation the probe alone keeps up (about 5e-5 here): beta must
    # be the medium's absolute one, the gain that of the probe's true transmission
    model = BenchModel(cfg, seed=seed, sample_rate=RATE)
    model.set_shutter("probe", False)
    dark = capture_dark(model_blocks(model, 2000))
    model.set_shutter("probe", True)
    baseline = capture_baseline(model_blocks(model, 5000), dark)
    model.set_pump(current=5.0, on=True)
    model.advance_to(model.t + 0.05)
    state = with_baseline(with_dark(new_state(params, "watch", {"pump_current": 5.0}), dark), baseline)
    for block in model_blocks(model, int(0.5 * RATE)):
        state, _ = update(state, block)
    (est,) = report(state)
    truth = model.truth()
    v = est.values
    assert abs(v["ln_ratio"].value - truth["ln_ratio"]) < 4 * v["ln_ratio"].sigma_noise
    assert abs(v["beta"].value - truth["beta"]) < 4 * v["beta"].sigma_noise, (v["beta"], truth["beta"])
    assert abs(v["n2_per_m3"].value - truth["n2_avg"]) < 4 * v["n2_per_m3"].sigma_noise
    db = 10 * math.log10(math.e) * truth["ln_t_pumped"]  # IEC 60027-3: 10 log10 of the power gain
    assert abs(v["gain_db"].value - db) < 4 * v["gain_db"].sigma_noise
    g = truth["gain_per_m"] / 100
    assert abs(v["gain_coefficient_per_cm"].value - g) < 4 * v["gain_coefficient_per_cm"].sigma_noise
    assert est.extra["beta_probe_held"] == pytest.approx(model.n2_probe_only / cfg.sample.n_total, rel=1e-9)


def test_a_very_thick_sample_gives_its_figures_in_db(params):
    # sigma_a N L = 0.12e-20 cm^2 x 2e24 cm^-3 x 0.5 cm = 1200: exp(-1200) underflows a float
    thick = params.replace(n_total=params.n_total * 1e4)
    alpha0 = thick.sigma_a * thick.n_total * thick.length
    assert alpha0 > 745
    vals = figures(thick, 0.46, 1e-5)
    held = probe_terms(thick)[2]
    ln_g = 0.46 + (thick.sigma_e + thick.sigma_a) * thick.length * thick.n_total * held - alpha0
    getcontext().prec = 40
    g = Decimal(ln_g).exp()  # the linear gain itself, about 1e-520, held exactly by decimal
    ref = float(10 * g.log10())
    assert vals["gain_db"].value == pytest.approx(ref, rel=1e-12)
    assert math.isfinite(vals["gain_db"].sigma)
    assert vals["gain_linear"].value == 0.0  # the linear figure honestly underflows


def test_the_probe_intensity_is_its_power_weighted_mean_everywhere(cfg, params, capsys):
    import json

    from bench.cli import main

    # int I^2 dA / int I dA over a Gaussian of 1 mW and w = 50 um (scipy quad, Siegman 17.1)
    w = cfg.probe.beam_diameter / 2
    p = cfg.probe.power

    def intensity(r):
        return 2 * p / (math.pi * w * w) * math.exp(-2 * r * r / (w * w))

    num, _ = integrate.quad(lambda r: intensity(r) ** 2 * 2 * math.pi * r, 0, 10 * w, epsrel=1e-12)
    den, _ = integrate.quad(lambda r: intensity(r) * 2 * math.pi * r, 0, 10 * w, epsrel=1e-12)
    i_mean = num / den
    assert params.probe_mean == pytest.approx(i_mean, rel=1e-9)
    h_nu = constants.h * constants.c / cfg.probe.wavelength
    s = cfg.sample
    i_sat = h_nu / ((s.sigma.probe_emission + s.sigma.probe_absorption) * s.upper_state_lifetime)
    assert main(["sample", "--json"]) == 0
    f = json.loads(capsys.readouterr().out)["figures"]
    # `gainbench sample` and the estimator's weak-probe flag use one and the same figure
    assert f["probe_intensity_over_saturation"] == pytest.approx(i_mean / i_sat, rel=1e-9)
    assert params.probe_saturation() == pytest.approx(f["probe_intensity_over_saturation"], rel=1e-12)
    # the probe-held excitation shown is the one the estimator adds back
    assert f["probe_held_fraction"] == pytest.approx(probe_terms(params)[2], rel=1e-12)
    # Fresnel at normal incidence: an uncoated face of n = 2 reflects (1/3)^2 = 11.1 %
    # (Born and Wolf sec. 1.5.3; n = 1.5 glass reflects 4 %, common practice, no source)
    assert f["fresnel_reflectance_per_face"] == pytest.approx(1 / 9, rel=1e-12)


def test_the_lifetime_uncertainty_enters_the_probe_held_part(params):
    # GUM sec. 5.1.3, numerically: d beta / d tau times u(tau), all other inputs exact
    only_tau = params.replace(u_length=0.0, u_n_total=0.0, u_cross_sections=0.0, u_tau=0.05)
    lnr = 0.46
    base = figures(only_tau, lnr, 1e-5)["beta"]
    h = 1e-6
    up = figures(only_tau.replace(tau=params.tau * (1 + h)), lnr, 1e-5)["beta"].value
    down = figures(only_tau.replace(tau=params.tau * (1 - h)), lnr, 1e-5)["beta"].value
    sensitivity = (up - down) / (2 * h)  # per relative change of tau
    assert base.sigma_systematic == pytest.approx(abs(sensitivity) * 0.05, rel=1e-4)
    assert base.sigma_systematic > 0
    assert figures(only_tau.replace(u_tau=0.0), lnr, 1e-5)["beta"].sigma_systematic == 0.0


def test_truth_rows_without_the_medium_transmission_fall_back_and_say_so(cfg):
    from bench.store.summary import truth_figures

    s = cfg.sample
    se, sa = s.sigma.probe_emission, s.sigma.probe_absorption
    n2 = 0.2 * s.n_total
    old = [
        {
            "t": 1.0,
            "n2_avg": n2,
            "beta": 0.2,
            "tau": 6e-4,
            "pump_w": 5.0,
            "ln_ratio": 0.46,
            "n_total": s.n_total,
            "length": s.length,
        }
    ]
    figs, source = truth_figures(old, cfg)
    assert "before the medium's transmission was stored" in source
    # Beer-Lambert of the medium's own absolute <N2> (Svelto sec. 2.4)
    ln_t = ((se + sa) * n2 - sa * s.n_total) * s.length
    assert figs["gain_db"] == pytest.approx(10 * math.log10(math.e) * ln_t, rel=1e-12)
    new = [dict(old[0], ln_t_pumped=ln_t + 0.01, ln_t_unpumped=-0.1, gain_per_m=(ln_t + 0.01) / s.length)]
    figs, source = truth_figures(new, cfg)
    assert source.startswith("medium: its own")
    assert figs["gain_db"] == pytest.approx(10 * math.log10(math.e) * (ln_t + 0.01), rel=1e-12)
    figs, source = truth_figures([{"t": 1.0, "ln_ratio": 0.46, "pump_w": 5.0}], cfg)
    assert "estimator's formulas" in source
    assert np.isfinite(figs["beta"])


def test_the_report_draws_the_medium_own_gain_as_truth(cfg):
    from bench.report.estimate_figures import truth_series

    s = cfg.sample
    row = {
        "t": 1.0,
        "pump_w": 5.0,
        "beta": 0.2,
        "ln_ratio": 0.46,
        "n_total": s.n_total,
        "length": s.length,
        "ln_t_pumped": 0.5,
    }
    series = truth_series([row], s.sigma.probe_absorption)
    # IEC 60027-3: 10 log10 of the power gain exp(ln T)
    assert series["gain_db"][0] == pytest.approx(10 * math.log10(math.exp(0.5)), rel=1e-12)


def test_sweep_steps_of_an_old_run_take_the_truth_at_their_pump_power(cfg):
    from types import MappingProxyType

    from bench.records import Estimate
    from bench.store.summary import sweep_steps

    class Rows:  # the part of a RunReader that sweep_steps reads
        def truth(self):
            return [
                {"t": 1.0 + k, "pump_w": p, "beta": b, "n2_avg": b * cfg.sample.n_total, "ln_ratio": 2.3 * b}
                for k, (p, b) in enumerate([(1.0, 0.05), (2.0, 0.09), (2.0, 0.09), (3.0, 0.13)])
            ]

    points = [
        {
            "pump_power_w": p,
            "pump_current_a": p + 0.6,
            "probe_wavelength_m": None,
            "ln_ratio": 2.3 * b,
            "ln_ratio_sigma": 1e-5,
            "beta": b,
            "beta_sigma": 1e-3,
            "beta_sigma_noise": 1e-6,
        }
        for p, b in [(1.0, 0.05), (2.0, 0.09), (3.0, 0.13)]
    ]  # no t_start / t_end: an old run
    final = Estimate(
        t=9.0,
        mode="sweep",
        scope="cumulative",
        values=MappingProxyType({}),
        flags=frozenset(),
        n_samples=1,
        extra=MappingProxyType({"points": points}),
    )
    steps = sweep_steps(final, Rows(), cfg)
    assert [st["truth"]["beta"]["value"] for st in steps] == [0.05, 0.09, 0.13]
    assert all("pump power" in st["truth_by"] for st in steps)
