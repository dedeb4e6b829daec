"""The Gaussian beam's peak against the power its profile carries, integrated by scipy."""

import math

import pytest
from scipy import integrate

from bench.physics import gaussian_peak


@pytest.mark.parametrize("power, diameter", [(1.0, 1e-3), (0.25, 3e-4), (12.0, 5e-3)])
def test_peak_profile_carries_the_power(power, diameter):
    # The 1/e^2 profile I(r) = I0 exp(-2 r^2 / w^2) integrated over the plane (scipy.integrate.quad)
    # must give back the power: the definition of the 1/e^2 radius (Siegman, Lasers, 1986, sec. 17.1).
    peak = gaussian_peak(power, diameter)
    w = diameter / 2
    carried, _ = integrate.quad(lambda r: peak * math.exp(-2 * r * r / (w * w)) * 2 * math.pi * r, 0, 10 * w)
    assert carried == pytest.approx(power, rel=1e-9)


def test_peak_bad_input_names_the_argument():
    with pytest.raises(ValueError, match="total"):
        gaussian_peak(-1.0, 1e-3)
    with pytest.raises(ValueError, match="beam_diameter"):
        gaussian_peak(1.0, 0.0)
