"""Wavelength role: a tunable probe source (wavelength in metres)."""

from __future__ import annotations

import time

from drivers.base import Driver, check_finite
from drivers.deadline import Deadline
from drivers.errors import InstrumentTimeout, ReplyError


class WavelengthSource(Driver):
    """Tunable probe source: set and read the wavelength, wait until it has settled."""

    DRIVER_NAME = "wavelength-source"
    ROLE = "wavelength"
    OPTIONS = frozenset()

    def set_wavelength(self, wavelength_m: float) -> None:
        """Tune to ``wavelength_m`` (m)."""
        self.session.write("set_wavelength", value=check_finite("wavelength_m", wavelength_m, positive=True))

    def wavelength(self) -> float:
        """The wavelength (m)."""
        return float(self.session.query("wavelength"))

    def settled(self) -> bool:
        """Whether the wavelength has settled after the last change."""
        return bool(self.session.query("settled"))

    def tuning_range(self) -> tuple[float, float]:
        """(shortest, longest) wavelength the source reaches (m)."""
        values = self.session.query("range")
        if len(values) != 2 or not values[0] < values[1]:
            raise ReplyError(
                "expected a tuning range <min>,<max> with min < max",
                role=self.role,
                resource=self.resource,
                reply=",".join(str(v) for v in values),
            )
        return float(values[0]), float(values[1])

    def wait_settled(self, timeout_s: float, poll_s: float = 0.01) -> None:
        """Poll `settled` until true; `InstrumentTimeout` if not within ``timeout_s``."""
        deadline = Deadline(check_finite("timeout_s", timeout_s, minimum=0.0))
        poll = check_finite("poll_s", poll_s, positive=True)
        while not self.settled():
            if deadline.expired():
                raise InstrumentTimeout(
                    f"the wavelength did not settle within {timeout_s} s",
                    role=self.role,
                    resource=self.resource,
                )
            time.sleep(min(poll, deadline.time_left()))
