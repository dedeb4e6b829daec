"""Detector role: a dual-phase lock-in amplifier referenced to the pump's modulation.

The lock-in multiplies the probe detector's signal by the reference (the pump driver's
modulation output) in phase and in quadrature and low-passes the products with its own RC
time constant: each `read` is one demodulated reading, X and Y in V rms, of the signal's
component at the modulation frequency (phase relative to the reference). Its auxiliary
inputs read DC levels (the probe's DC level, for the ratio). Readings are polled, so each is
time-stamped at the request and at the reply (``time.monotonic``); the midpoint is the
reading's time. Overload (an output beyond the sensitivity's full scale) is reported with the
reading when the profile can ask for it; it flags the reading, it says nothing about the pump.

Its operations are the detector role's lock-in ones (`drivers.roles.LOCKIN`); a profile used
with it must define ``read_xy`` (`drivers.roles.DRIVER_NEEDS`).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

from drivers.base import Driver, check_finite
from drivers.errors import DriverConfigError, ReplyError
from drivers.instruments.digitiser import SIM_TRUTH_FIELDS

PHASE_UNITS = {"deg": math.pi / 180.0, "rad": 1.0}
DEFAULT_AUX = {1: "probe_dc"}
DEFAULT_POLL_RATE = 20.0  # Hz
MAX_POLL_RATE = 1e3  # Hz


@dataclass(frozen=True)
class LockInReading:
    """One demodulated reading.

    Attributes
    ----------
    x, y : float
        In-phase and quadrature outputs, V rms.
    overload : bool or None
        The instrument reported an overload with this reading (None: the profile cannot ask).
    t_request, t_reply : float
        ``time.monotonic()`` just before the request and just after the reply, s.
    """

    x: float
    y: float
    overload: bool | None
    t_request: float
    t_reply: float

    @property
    def r(self) -> float:
        """Magnitude, V rms."""
        return math.hypot(self.x, self.y)

    @property
    def theta(self) -> float:
        """Phase relative to the reference, rad."""
        return math.atan2(self.y, self.x)

    @property
    def t(self) -> float:
        """The reading's time: the midpoint of request and reply."""
        return 0.5 * (self.t_request + self.t_reply)

    @property
    def spread(self) -> float:
        """Reply minus request time, s (the uncertainty of `t`)."""
        return self.t_reply - self.t_request


class LockIn(Driver):
    """Dual-phase lock-in amplifier read as X, Y (V rms) per poll, with auxiliary DC inputs."""

    DRIVER_NAME = "lockin"
    ROLE = "detector"
    OPTIONS = frozenset(
        {
            "time_constant",
            "sensitivity",
            "filter_order",
            "aux_channels",
            "phase_unit",
            "compound_queries",
            "poll_rate",
        }
    )

    def __init__(self, session, options=None) -> None:
        super().__init__(session, options)
        rate = self._option_quantity("poll_rate", "frequency", DEFAULT_POLL_RATE)
        assert rate is not None
        if not 0 < rate <= MAX_POLL_RATE:
            raise DriverConfigError(
                f"{self._where('poll_rate')}: {self.options['poll_rate']!r} is not a rate "
                f"above 0 and up to {MAX_POLL_RATE:g} Hz"
            )
        self.poll_rate_hz: float = rate
        self.time_constant_s: float | None = self._option_quantity("time_constant", "time", None)
        self.sensitivity_v: float | None = self._option_quantity("sensitivity", "voltage", None)
        for name, value in (("time_constant", self.time_constant_s), ("sensitivity", self.sensitivity_v)):
            if value is not None and not value > 0:
                raise DriverConfigError(f"{self._where(name)}: {self.options[name]!r} is not positive")
        self.filter_order_n: int | None = self._option_order()
        unit = self.options.get("phase_unit", "deg")
        if unit not in PHASE_UNITS:
            raise DriverConfigError(
                f"{self._where('phase_unit')}: {unit!r} is not one of {sorted(PHASE_UNITS)}"
            )
        self._phase_factor = PHASE_UNITS[unit]
        self.aux_names: dict[int, str] = self._option_aux()
        if not self.session.has("read_xy"):
            raise DriverConfigError(
                f"{self._where('profile')}: profile {self.profile_name} has no read_xy; "
                "a lock-in profile defines commands.read_xy"
            )

    # -- options -----------------------------------------------------------------------

    def _option_order(self) -> int | None:
        if "filter_order" not in self.options:
            return None
        value = self.options["filter_order"]
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= 8:
            raise DriverConfigError(
                f"{self._where('filter_order')}: {value!r} is not a number of poles 1 ... 8"
            )
        return value

    def _option_aux(self) -> dict[int, str]:
        value = self.options.get("aux_channels", DEFAULT_AUX)
        if not isinstance(value, dict) or not value:
            raise DriverConfigError(
                f'{self._where("aux_channels")}: expected a table such as {{ 1 = "probe_dc" }}'
            )
        names: dict[int, str] = {}
        for key, name in value.items():
            try:
                number = int(key)
            except (TypeError, ValueError):
                raise DriverConfigError(
                    f"{self._where('aux_channels')}.{key}: expected an input number"
                ) from None
            if number < 1 or not isinstance(name, str) or not name.strip():
                raise DriverConfigError(
                    f"{self._where('aux_channels')}.{key}: expected an input number >= 1 and a name"
                )
            names[number] = name.strip()
        return names

    @property
    def period_s(self) -> float:
        """Mean seconds between the starts of two readings (`poll_rate`)."""
        return 1.0 / self.poll_rate_hz

    def aux_number(self, name: str) -> int | None:
        """The auxiliary input named ``name`` in ``aux_channels`` (None: no such input)."""
        for number, known in self.aux_names.items():
            if known == name:
                return number
        return None

    # -- settings ----------------------------------------------------------------------

    def configure(self) -> None:
        """Apply the options that are given (time constant, filter order, sensitivity)."""
        if self.time_constant_s is not None:
            self.set_time_constant(self.time_constant_s)
        if self.filter_order_n is not None:
            self.set_filter_order(self.filter_order_n)
        if self.sensitivity_v is not None:
            self.set_sensitivity(self.sensitivity_v)

    def set_time_constant(self, seconds: float) -> None:
        """Set the output filter's time constant (s); the instrument may round it."""
        self.session.write("set_time_constant", value=check_finite("seconds", seconds, positive=True))

    def time_constant(self) -> float:
        """The output filter's time constant (s)."""
        return float(self.session.query("time_constant"))

    def set_filter_order(self, poles: int) -> None:
        """Set the number of RC poles of the output filter (1: 6 dB/oct, 2: 12 dB/oct, ...)."""
        if isinstance(poles, bool) or not isinstance(poles, int) or not 1 <= poles <= 8:
            raise ValueError(f"poles: expected a whole number 1 ... 8, got {poles!r}")
        self.session.write("set_filter_order", value=float(poles))

    def filter_order(self) -> int:
        """The number of RC poles of the output filter."""
        return int(self.session.query("filter_order"))

    def set_sensitivity(self, volts: float) -> None:
        """Set the full scale of X, Y and R (V rms); beyond it the lock-in overloads."""
        self.session.write("set_sensitivity", value=check_finite("volts", volts, positive=True))

    def sensitivity(self) -> float:
        """Full scale of X, Y and R (V rms)."""
        return float(self.session.query("sensitivity"))

    def reference_frequency(self) -> float:
        """Frequency of the reference it is locked to (Hz; 0 with no reference)."""
        return float(self.session.query("reference_frequency"))

    # -- readings ----------------------------------------------------------------------

    def read_xy(self) -> tuple[float, float]:
        """(X, Y) in V rms."""
        values = self.session.query("read_xy")
        if len(values) != 2:
            raise ReplyError(
                f"expected X,Y (2 values), got {len(values)}", role=self.role, resource=self.resource
            )
        return float(values[0]), float(values[1])

    def read_r_theta(self) -> tuple[float, float]:
        """(R in V rms, theta in rad); computed from X, Y if the profile has no read_r_theta."""
        if not self.session.has("read_r_theta"):
            x, y = self.read_xy()
            return math.hypot(x, y), math.atan2(y, x)
        values = self.session.query("read_r_theta")
        if len(values) != 2:
            raise ReplyError(
                f"expected R,theta (2 values), got {len(values)}", role=self.role, resource=self.resource
            )
        return float(values[0]), float(values[1]) * self._phase_factor

    def overloaded(self) -> bool | None:
        """Whether the instrument reports an overload (since last asked); None if it cannot say."""
        if not self.session.has("overload"):
            return None
        return bool(self.session.query("overload"))

    def read(self, clock: Callable[[], float] = time.monotonic) -> LockInReading:
        """One reading: X, Y and the overload state, time-stamped with ``clock()`` at the
        request and at the reply.

        With ``compound_queries`` in the profile's options, X, Y and the overload state come
        in one exchange."""
        t0 = clock()
        if self.session.has("overload") and self.options.get("compound_queries"):
            values, over = self.session.query_many(("read_xy", "overload"))
            x, y = float(values[0]), float(values[1])
            overload: bool | None = bool(over)
        else:
            x, y = self.read_xy()
            overload = self.overloaded()
        t1 = clock()
        return LockInReading(x, y, overload, t0, t1)

    def read_aux(self, n: int | str) -> float:
        """DC level of auxiliary input ``n`` (a number, or a name from ``aux_channels``), V."""
        if isinstance(n, str):
            for number, name in self.aux_names.items():
                if name == n:
                    n = number
                    break
            else:
                raise ValueError(
                    f"n: unknown auxiliary input {n!r}; known: {', '.join(self.aux_names.values())}"
                )
        if isinstance(n, bool) or not isinstance(n, int) or n < 1:
            raise ValueError(f"n: expected an input number >= 1, got {n!r}")
        return float(self.session.query("read_aux", n=n))

    def clock(self) -> float:
        """Seconds on the instrument's clock."""
        return float(self.session.query("clock"))

    def sim_truth(self) -> dict[str, float]:
        """The simulated bench's true state (simulator-only ``SIM:TRUTH?``), by field name."""
        values = self.session.query("sim_truth")
        if len(values) != len(SIM_TRUTH_FIELDS):
            raise ReplyError(
                f"expected {len(SIM_TRUTH_FIELDS)} truth values, got {len(values)}",
                role=self.role,
                resource=self.resource,
            )
        return {name: float(v) for name, v in zip(SIM_TRUTH_FIELDS, values)}
