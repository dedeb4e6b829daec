"""The simulated tunable probe's invented spectrum: Stark lines, McCumber reciprocity, and the
bench file's cross-sections unchanged at the bench wavelength.

Sources: McCumber reciprocity sigma_a / sigma_e = exp((h nu - E_zl) / k T), so the two are
equal at the zero line (D. E. McCumber, Phys. Rev. 134, A299 (1964); S. A. Payne et al., IEEE
J. Quantum Electron. 28, 2619 (1992)); constants from scipy.constants (CODATA). That a
Stark-split Yb-like ion shows more than one emission peak over 1000-1060 nm: common practice, no
source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants
from scipy.signal import find_peaks

from bench.config import load_bench
from simulated_instruments.lineshape import probe_cross_sections, tuning_range, zero_line_wavelength
from simulated_instruments.optical_setup import BenchModel

CFG = load_bench()
SIG = CFG.sample.sigma
LAM0 = CFG.probe.wavelength
T = CFG.sample.temperature


def xs(lam: float) -> tuple[float, float]:
    return probe_cross_sections(lam, LAM0, SIG.probe_absorption, SIG.probe_emission, T)


def test_bench_wavelength_gives_the_bench_files_cross_sections_exactly():
    assert xs(LAM0) == (SIG.probe_absorption, SIG.probe_emission)
    truth = BenchModel(CFG).truth()
    assert truth["sigma_a"] == SIG.probe_absorption and truth["sigma_e"] == SIG.probe_emission
    assert truth["probe_wavelength"] == LAM0


def test_reciprocity_holds_over_the_tuning_range_and_ratio_is_one_at_the_zero_line():
    lam_zl = zero_line_wavelength(LAM0, SIG.probe_absorption, SIG.probe_emission, T)
    assert 960e-9 < lam_zl < 985e-9  # a Yb-like zero line (common practice, no source)
    lo, hi = tuning_range(LAM0)
    for lam in np.linspace(lo, hi, 31):
        sa, se = xs(float(lam))
        expect = math.exp(constants.h * constants.c * (1 / lam - 1 / lam_zl) / (constants.k * T))
        assert sa / se == pytest.approx(expect, rel=1e-9)
    # extrapolated to the zero line itself the two cross-sections are equal
    sa, se = probe_cross_sections(lam_zl, LAM0, SIG.probe_absorption, SIG.probe_emission, T)
    assert sa == pytest.approx(se, rel=1e-9)


def test_emission_has_several_stark_peaks_with_realistic_magnitudes():
    lo, hi = tuning_range(LAM0)
    lam = np.linspace(lo, hi, 601)
    se = np.array([xs(float(x))[1] for x in lam])
    peaks, _ = find_peaks(se)
    assert len(peaks) >= 2
    assert 1e-25 < se.max() < 1e-23  # 1e-21 ... 1e-19 cm^2 (common practice, no source)
    assert np.all(se > 0)


def test_tuned_truth_follows_the_spectrum():
    m = BenchModel(CFG)
    lam = LAM0 - 16e-9
    m.set_probe_wavelength(lam)
    truth = m.truth()
    assert (truth["sigma_a"], truth["sigma_e"]) == xs(lam)
    assert truth["ln_t_unpumped"] == pytest.approx(
        -truth["sigma_a"] * CFG.sample.n_total * CFG.sample.length, rel=0.01
    )
