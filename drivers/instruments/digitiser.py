"""Detector role: a multi-channel digitiser read as sample sets from a ring buffer.

Each `fetch` asks where the next unread sample set is (``position``), then for up to
``max_sets`` sets (``fetch``), so every block carries the absolute index of its first sample
set: the block's time is ``first_index / rate`` after ``start``, and a gap in the indices
shows lost data.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from drivers.base import Driver, check_finite
from drivers.errors import DriverConfigError, ReplyError

#: Channel number -> channel name, unless the options say otherwise.
DEFAULT_CHANNEL_NAMES = {1: "probe", 2: "reference", 3: "pump_monitor"}

#: Field names of the simulator-only truth query, in reply order.
SIM_TRUTH_FIELDS = (
    "t",
    "n2_avg",
    "beta",
    "tau",
    "pump_W",
    "ln_ratio",
    "n_total",
    "length",
    "ln_t_pumped",
    "ln_t_unpumped",
    "gain_per_m",
    "n2_probe_only",
    "inputs_steady_s",
    "probe_wavelength",
    "sigma_a",
    "sigma_e",
)

DATA_FORMATS = ("binary", "ascii")


@dataclass(frozen=True, eq=False)
class FetchResult:
    """One read of the digitiser.

    Attributes
    ----------
    first_index : int
        Absolute index (since ``start``) of the first sample set in ``data``.
    data : numpy.ndarray
        Shape ``(n, n_channels)``, float64 volts, columns in scan order.
    lost : int
        Sample sets the instrument dropped (ring-buffer overflow) since ``start``.
    """

    first_index: int
    data: np.ndarray
    lost: int


class Digitiser(Driver):
    """Multi-channel digitiser (probe, reference, pump monitor) read in sample sets."""

    DRIVER_NAME = "digitiser"
    ROLE = "detector"
    OPTIONS = frozenset({"sample_rate", "range", "format", "channels", "channel_names"})

    def __init__(self, session, options=None) -> None:
        super().__init__(session, options)
        self.rate_hz: float | None = self._option_quantity("sample_rate", "frequency", None)
        self.range_v: float | None = self._option_quantity("range", "voltage", None)
        self.data_format: str = self._option_format()
        self.channels: tuple[int, ...] = self._option_channels()
        self.names_by_channel: dict[int, str] = self._option_channel_names(DEFAULT_CHANNEL_NAMES)
        for name, value in (("sample_rate", self.rate_hz), ("range", self.range_v)):
            if value is not None and not value > 0:
                raise DriverConfigError(f"{self._where(name)}: {self.options[name]!r} is not positive")
        if (
            self.data_format == "ascii"
            and not self.session.has("fetch_ascii")
            and self.session.profile.command("fetch").reply != "csv_floats"
        ):
            raise DriverConfigError(
                f"{self._where('format')}: profile {self.profile_name} has no ASCII "
                'fetch (commands.fetch_ascii); use format = "binary"'
            )

    # -- options -----------------------------------------------------------------------

    def _option_format(self) -> str:
        value = self.options.get("format", "binary")
        if value not in DATA_FORMATS:
            raise DriverConfigError(f"{self._where('format')}: {value!r} is not one of {list(DATA_FORMATS)}")
        return value

    def _option_channels(self) -> tuple[int, ...]:
        value = self.options.get("channels", [1, 2, 3])
        try:
            return _check_channels(value)
        except ValueError as exc:
            raise DriverConfigError(f"{self._where('channels')}: {exc}") from None

    # -- operations --------------------------------------------------------------------

    @property
    def channel_names(self) -> tuple[str, ...]:
        """Names of the columns of `FetchResult.data`, in scan order."""
        return tuple(self.names_by_channel.get(c, f"ch{c}") for c in self.channels)

    def configure(
        self,
        rate_hz: float | None = None,
        channels: tuple[int, ...] | list[int] | None = None,
        range_v: float | None = None,
        data_format: str | None = None,
    ) -> None:
        """Set sample rate, scanned channels, input range and data format.

        Arguments not given fall back to the options (``sample_rate``, ``channels``, ``range``,
        ``format``); what is still unknown is left as the instrument has it. The rate read
        back, when the profile can read it, becomes `rate_hz`.

        An acquisition still running (left by a program that ended without stopping it) is
        stopped first: digitisers commonly refuse settings while acquiring.
        """
        rate = self.rate_hz if rate_hz is None else check_finite("rate_hz", rate_hz, positive=True)
        chans = self.channels if channels is None else _check_channels(channels)
        rng = self.range_v if range_v is None else check_finite("range_v", range_v, positive=True)
        fmt = self.data_format if data_format is None else data_format
        if fmt not in DATA_FORMATS:
            raise ValueError(f"data_format: expected one of {list(DATA_FORMATS)}, got {data_format!r}")
        if (
            fmt == "ascii"
            and not self.session.has("fetch_ascii")
            and self.session.profile.command("fetch").reply != "csv_floats"
        ):
            raise ValueError("data_format: this profile has no ASCII fetch (commands.fetch_ascii)")
        self.session.write("stop")
        if rate is not None:
            self.session.write("set_rate", value=rate)
            if self.session.has("rate"):
                rate = float(self.session.query("rate"))
        self.session.write("set_channels", channels=",".join(str(c) for c in chans))
        if rng is not None:
            self.session.write("set_range", value=rng)
        op = "format_binary" if fmt == "binary" else "format_ascii"
        if self.session.has(op):
            self.session.write(op)
        self.rate_hz, self.channels, self.range_v, self.data_format = rate, chans, rng, fmt

    def start(self) -> None:
        """Clear the buffer, set the sample index to 0 and start acquiring."""
        self.session.write("start")

    def stop(self) -> None:
        """Stop acquiring."""
        self.session.write("stop")

    def position(self) -> int:
        """Absolute index of the next sample set `fetch` will return."""
        return int(self.session.query("position"))

    def lost(self) -> int:
        """Sample sets dropped since ``start`` (0 if the profile cannot ask)."""
        return int(self.session.query("lost")) if self.session.has("lost") else 0

    def clock(self) -> float:
        """Seconds on the acquisition clock since ``start``."""
        return float(self.session.query("clock"))

    def fetch(self, max_sets: int) -> FetchResult:
        """Up to ``max_sets`` unread sample sets (fewer, or none, if fewer are waiting)."""
        if isinstance(max_sets, bool) or not isinstance(max_sets, (int, np.integer)) or max_sets < 1:
            raise ValueError(f"max_sets: expected an int >= 1, got {max_sets!r}")
        first = self.position()
        op = "fetch_ascii" if self.data_format == "ascii" and self.session.has("fetch_ascii") else "fetch"
        flat = np.asarray(self.session.query(op, count=int(max_sets)), dtype=np.float64)
        n_ch = len(self.channels)
        if flat.size % n_ch:
            raise ReplyError(
                f"{flat.size} values are not whole sample sets of {n_ch} channels",
                role=self.role,
                resource=self.resource,
            )
        n_sets = flat.size // n_ch
        if n_sets > max_sets:
            raise ReplyError(
                f"asked for at most {max_sets} sample sets, got {n_sets}",
                role=self.role,
                resource=self.resource,
            )
        return FetchResult(first_index=first, data=flat.reshape(n_sets, n_ch), lost=self.lost())

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


def _check_channels(value: object) -> tuple[int, ...]:
    if isinstance(value, (str, bytes)) or not hasattr(value, "__iter__"):
        raise ValueError(f"channels: expected a list of channel numbers, got {value!r}")
    chans = tuple(value)  # type: ignore[arg-type]
    if not chans:
        raise ValueError("channels: expected at least one channel")
    for c in chans:
        if isinstance(c, bool) or not isinstance(c, (int, np.integer)) or c < 1:
            raise ValueError(f"channels: {c!r} is not a channel number >= 1")
    if len(set(chans)) != len(chans):
        raise ValueError(f"channels: {list(chans)} names a channel twice")
    return tuple(int(c) for c in chans)
