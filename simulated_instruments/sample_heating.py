"""The simulated sample's temperature: it heats with the pump power it absorbs.

A first-order thermal model with invented constants (a demo sample, not a measured one): at
steady state the sample sits ``heating`` kelvin per absorbed watt above the ambient, and it
follows a change with the time constant ``time_constant``, stepped exactly for a constant
absorbed power over each step. The absorbed power is the pump on the sample times the
unbleached absorbed fraction ``1 - exp(-sigma_pa N L)`` (Beer-Lambert); bleaching and the
share of the absorbed power that leaves as fluorescence are left out (the constant absorbs
them). The probe's cross-sections follow the temperature linearly about the ambient,
``sigma(T) = sigma (1 + k (T - T_ambient))``, with the sample's stated coefficients, so that an
unheated sample is exactly the sample of the bench file.
"""

from __future__ import annotations

import math

#: Standard deviation of one temperature reading, K (an invented sensor: a thermistor on the
#: sample mount read to 10 mK).
READING_NOISE_K = 0.01


class SampleHeating:
    """The sample's temperature over time (K), advanced block by block."""

    def __init__(self, ambient: float, heating: float, time_constant: float, absorbed_fraction: float):
        if not (ambient > 0 and heating >= 0 and time_constant > 0 and 0 <= absorbed_fraction <= 1):
            raise ValueError(
                "sample heating: expected an ambient temperature > 0 K, heating >= 0 K/W, a time "
                f"constant > 0 s and an absorbed fraction in [0, 1]; got {ambient!r}, {heating!r}, "
                f"{time_constant!r}, {absorbed_fraction!r}"
            )
        self.ambient = float(ambient)
        self.heating = float(heating)
        self.time_constant = float(time_constant)
        self.absorbed_fraction = float(absorbed_fraction)
        self.t = 0.0
        self.temperature = self.ambient

    @property
    def enabled(self) -> bool:
        return self.heating > 0

    def advance(self, t: float, pump_w: float) -> float:
        """The temperature at ``t`` (s) with ``pump_w`` (W on the sample) since the last call."""
        if t > self.t:
            target = self.ambient + self.heating * self.absorbed_fraction * max(0.0, float(pump_w))
            self.temperature = target + (self.temperature - target) * math.exp(
                -(t - self.t) / self.time_constant
            )
            self.t = float(t)
        return self.temperature

    def excess(self) -> float:
        """Kelvin above the ambient now (what the cross-sections scale with)."""
        return self.temperature - self.ambient
