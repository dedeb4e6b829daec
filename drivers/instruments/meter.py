"""Detector role: a multi-channel meter (optical power meter, photodiode amplifier with a
voltmeter) read one reading at a time, software-timed.

Each `read` is one reading of every channel: one exchange (``read_all``, a ``csv_floats``
reply in channel order) when the profile has it, else one ``read_channel`` exchange per
channel. The reading is time-stamped by the caller's clock just before the request and just
after the reply (`MeterReading`): the midpoint is the sample time, half the spread its timing
uncertainty. There is no sample index on the instrument: the caller numbers its requests.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from drivers.base import Driver, check_finite
from drivers.errors import DriverConfigError, ReplyError
from drivers.instruments.digitiser import DEFAULT_CHANNEL_NAMES, SIM_TRUTH_FIELDS

#: Readings per second unless the options say otherwise.
DEFAULT_POLL_RATE = 20.0  # Hz
#: The fastest poll rate accepted: beyond this the exchange time, not the rate, sets the pace.
MAX_POLL_RATE = 10e3  # Hz
#: The most averages `set_averages` sends (a meter's count is commonly a few thousand at most).
MAX_AVERAGES = 100_000


@dataclass(frozen=True, eq=False)
class MeterReading:
    """One reading of every channel.

    Attributes
    ----------
    t_request, t_reply : float
        The caller's clock just before the request was sent and just after the (last) reply.
    values : numpy.ndarray
        Shape ``(n_channels,)``, float64 volts (SI), in channel order.
    """

    t_request: float
    t_reply: float
    values: np.ndarray

    @property
    def t(self) -> float:
        """The sample time: the midpoint of request and reply."""
        return 0.5 * (self.t_request + self.t_reply)

    @property
    def spread(self) -> float:
        """Request-to-reply time: the reading lies somewhere in it."""
        return self.t_reply - self.t_request


class Meter(Driver):
    """Multi-channel meter (probe, reference, pump monitor) polled one reading at a time."""

    DRIVER_NAME = "meter"
    ROLE = "detector"
    OPTIONS = frozenset({"poll_rate", "channels", "channel_names", "averages", "range"})

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
        self.range_v: float | None = self._option_quantity("range", "voltage", None)
        if self.range_v is not None and not self.range_v > 0:
            raise DriverConfigError(f"{self._where('range')}: {self.options['range']!r} is not positive")
        if self.range_v is not None and not self.session.has("set_range"):
            raise DriverConfigError(
                f"{self._where('range')}: profile {self.profile_name} cannot set the range "
                "(commands.set_range); remove the option or add the command"
            )
        self.averages: int | None = self._option_averages()
        if self.averages is not None and not self.session.has("set_averages"):
            raise DriverConfigError(
                f"{self._where('averages')}: profile {self.profile_name} cannot set the averaging "
                "(commands.set_averages); remove the option or add the command"
            )
        self.channels: tuple[int, ...] = self._option_channels()
        self.names_by_channel: dict[int, str] = self._option_channel_names(DEFAULT_CHANNEL_NAMES)
        if not (self.session.has("read_all") or self.session.has("read_channel")):
            raise DriverConfigError(
                f"instruments.{self.session.role}.profile: profile {self.profile_name} has neither "
                "commands.read_all nor commands.read_channel"
            )

    # -- options -----------------------------------------------------------------------

    def _option_averages(self) -> int | None:
        value = self.options.get("averages")
        if value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_AVERAGES:
            raise DriverConfigError(
                f"{self._where('averages')}: {value!r} is not a whole number from 1 to {MAX_AVERAGES}"
            )
        return int(value)

    def _option_channels(self) -> tuple[int, ...]:
        value = self.options.get("channels", [1, 2, 3])
        if isinstance(value, (str, bytes)) or not isinstance(value, (list, tuple)) or not value:
            raise DriverConfigError(
                f"{self._where('channels')}: expected a list of channel numbers, got {value!r}"
            )
        for c in value:
            if isinstance(c, bool) or not isinstance(c, int) or c < 1:
                raise DriverConfigError(f"{self._where('channels')}: {c!r} is not a channel number >= 1")
        if len(set(value)) != len(value):
            raise DriverConfigError(f"{self._where('channels')}: {list(value)} names a channel twice")
        return tuple(int(c) for c in value)

    # -- operations --------------------------------------------------------------------

    @property
    def channel_names(self) -> tuple[str, ...]:
        """Names of `MeterReading.values`, in channel order."""
        return tuple(self.names_by_channel.get(c, f"ch{c}") for c in self.channels)

    @property
    def period_s(self) -> float:
        """Seconds between the starts of two readings."""
        return 1.0 / self.poll_rate_hz

    def configure(self, range_v: float | None = None, averages: int | None = None) -> None:
        """Set the input range and the averaging count (falling back to the options; what is
        still unknown is left as the instrument has it). The range read back, when the
        profile can read it, becomes `range_v`."""
        rng = self.range_v if range_v is None else check_finite("range_v", range_v, positive=True)
        avg = self.averages if averages is None else averages
        if avg is not None and (
            isinstance(avg, bool) or not isinstance(avg, int) or not 1 <= avg <= MAX_AVERAGES
        ):
            raise ValueError(f"averages: expected a whole number from 1 to {MAX_AVERAGES}, got {avg!r}")
        if rng is not None:
            self.session.write("set_range", value=rng)
            if self.session.has("range"):
                rng = float(self.session.query("range"))
        if avg is not None:
            self.session.write("set_averages", value=avg)
        self.range_v, self.averages = rng, avg

    def read(self, clock: Callable[[], float]) -> MeterReading:
        """One reading of every channel, stamped with ``clock()`` before the request and after
        the reply."""
        t1 = clock()
        if self.session.has("read_all"):
            raw = np.asarray(self.session.query("read_all"), dtype=np.float64).ravel()
            if raw.size != len(self.channels):
                raise ReplyError(
                    f"expected {len(self.channels)} values (one per channel {list(self.channels)}), "
                    f"got {raw.size}",
                    role=self.role,
                    resource=self.resource,
                )
        else:
            raw = np.array([float(self.session.query("read_channel", n=c)) for c in self.channels])
        t2 = clock()
        bad = [c for c, v in zip(self.channels, raw) if not math.isfinite(v)]
        if bad:
            raise ReplyError(
                f"channel(s) {bad} read {[float(raw[self.channels.index(c)]) for c in bad]}: "
                "not finite volts (an overload marker?)",
                role=self.role,
                resource=self.resource,
            )
        return MeterReading(t1, t2, raw)

    def clock(self) -> float:
        """Seconds on the instrument's clock (since it was switched on or reset)."""
        return float(self.session.query("clock"))

    def stop(self) -> None:
        """Nothing runs between readings: nothing to stop."""

    def sim_truth(self) -> dict[str, float]:
        """The simulated bench's true state (simulator-only ``SIM:TRUTH?``), by field name."""
        values = np.asarray(self.session.query("sim_truth"), dtype=np.float64)
        if values.size != len(SIM_TRUTH_FIELDS):
            raise ReplyError(
                f"expected {len(SIM_TRUTH_FIELDS)} truth values ({', '.join(SIM_TRUTH_FIELDS)}), got {values.size}",
                role=self.role,
                resource=self.resource,
            )
        return {name: float(v) for name, v in zip(SIM_TRUTH_FIELDS, values)}
