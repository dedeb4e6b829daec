"""ln R of a heated sample, back at its baseline's temperature, against a worked example.

Worked by hand with Beer-Lambert for the two-manifold medium, ln T = (sigma_e + sigma_a) L N2 -
sigma_a N L (O. Svelto, Principles of Lasers, 5th ed., sec. 2.4): sigma_e = 2.2e-24 m^2,
sigma_a = 0.12e-24 m^2, N = 2e26 m^-3, L = 5 mm, N2 = 6e25 m^-3, no probe-held excitation.
At the baseline ln T0 = -0.12. Pumped and 20 K warmer with sigma_a up 1 %/K (0.144e-24 m^2):
ln T1 = 2.344e-24 * 6e25 * 5e-3 - 0.144e-24 * 2e26 * 5e-3 = 0.7032 - 0.144 = 0.5592, so the
measured ln R = 0.6792, while at the baseline's temperature the same N2 gives
ln R0 = 2.32e-24 * 6e25 * 5e-3 = 0.696.
"""

from __future__ import annotations

import pytest

from bench.physics import ln_ratio_at_baseline_temperature

SE, SA, N, L = 2.2e-24, 0.12e-24, 2e26, 5e-3


def test_the_worked_example():
    got = ln_ratio_at_baseline_temperature(0.6792, 20.0, SE, SA, N, L, 0.0, 0.0, 0.01)
    assert got == pytest.approx(0.696, abs=1e-12)


def test_with_an_emission_coefficient_too():
    # sigma_e down 0.5 %/K: at +20 K sigma_e = 1.98e-24, so ln T1 = 2.124e-24 * 0.3e24 - 0.144 = 0.4932
    # and ln R = 0.6132 (by hand); back at the baseline's temperature 0.696 again
    got = ln_ratio_at_baseline_temperature(0.6132, 20.0, SE, SA, N, L, 0.0, -0.005, 0.01)
    assert got == pytest.approx(0.696, abs=1e-12)


@pytest.mark.parametrize("dt, ke, ka", [(0.0, 0.0, 0.01), (15.0, 0.0, 0.0), (0.0, -0.005, 0.02)])
def test_no_heating_or_no_dependence_changes_nothing(dt, ke, ka):
    assert ln_ratio_at_baseline_temperature(0.5, dt, SE, SA, N, L, 1e23, ke, ka) == pytest.approx(
        0.5, rel=1e-12
    )


def test_a_temperature_that_would_make_the_cross_sections_negative_is_refused():
    with pytest.raises(ValueError, match="delta_t"):
        ln_ratio_at_baseline_temperature(0.5, -500.0, SE, SA, N, L, 0.0, 0.01, 0.01)


def test_a_warm_modulated_sample_the_worked_example():
    # both half-periods 20 K warm: ln R = (sigma_e + sigma_a1) L N2 = 2.344e-24 * 6e25 * 5e-3 = 0.7032
    # (the sigma_a N L terms cancel, by hand); at the baseline's cross-sections 0.696
    from bench.physics import ln_ratio_of_a_warm_modulated_sample

    assert ln_ratio_of_a_warm_modulated_sample(0.7032, 20.0, SE, SA, 0.0, 0.01) == pytest.approx(
        0.696, abs=1e-12
    )
    assert ln_ratio_of_a_warm_modulated_sample(0.7032, 0.0, SE, SA, 0.0, 0.01) == pytest.approx(
        0.7032, rel=1e-12
    )
