"""Detector role: a triggered oscilloscope, read one acquisition at a time.

An acquisition is armed on the pump's trigger (the scope's trigger input wired to the pump
driver's trigger or sync output, or to a photodiode on the pump beam). `Scope.acquire` selects
one trigger per acquisition (``single``) or the mean of ``averages`` triggers
(``set_averages``), arms (``arm``), asks until the instrument says it is done (``complete``:
a status query, or ``*OPC?`` on an instrument that answers it once the acquisition is done)
and reads each channel's record (``fetch_waveform``: an IEEE 488.2 definite-length block of
int8 or int16 codes, in the byte order its reply format declares, read by the session by its
declared length) with that channel's scaling (``waveform_scaling``, four numbers)::

    volts[k] = code[k] * y_scale + y_offset
    time[k]  = x_origin + k * x_increment        (s from the trigger; x_origin < 0: pretrigger)

The host clock (``time.monotonic`` unless the caller gives another) is read just before the
arm command is sent and just after the scope first reports the acquisition complete: the
trigger fell between the two. Its operations are the detector role's scope ones
(`drivers.roles.SCOPE`); a profile used with it must define ``arm``, ``complete``,
``fetch_waveform`` and ``waveform_scaling`` (`drivers.roles.DRIVER_NEEDS`).

References
----------
.. [1] IEEE Std 488.2-1992, "IEEE Standard Codes, Formats, Protocols, and Common Commands",
   section 8.7.9 (definite length arbitrary block response data), 10.19 (``*OPC?``).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np

from drivers.base import Driver
from drivers.errors import DriverConfigError, InstrumentTimeout, ProfileError, ReplyError
from drivers.instruments.digitiser import DEFAULT_CHANNEL_NAMES, SIM_TRUTH_FIELDS

#: Seconds an acquisition may take, from arming to complete, unless the options say otherwise.
DEFAULT_COMPLETION_TIMEOUT = 10.0
#: Seconds between two ``complete`` queries while waiting (the last wait is shorter).
COMPLETE_POLL_S = 0.01
#: The most triggers averaged into one acquisition that `Scope.set_averages` sends.
MAX_AVERAGES = 1 << 20
#: The fields of the simulated scope's ``sim_pulse_truth`` reply, in reply order (the simulated
#: bench's latest pump pulse: see simulated_instruments/COMMANDS.md).
SIM_PULSE_FIELDS = (
    "pulse_t",
    "n2_before",
    "n2_peak",
    "beta_peak",
    "ln_ratio_peak",
    "pulse_pump_w",
    "tau",
    "pulses",
)
#: The fields of a ``waveform_scaling`` reply, in reply order.
SCALING_FIELDS = ("x_increment", "x_origin", "y_scale", "y_offset")


@dataclass(frozen=True)
class WaveformScaling:
    """How one channel's codes become volts and its sample numbers seconds.

    Attributes
    ----------
    x_increment : float
        Seconds between two samples (> 0).
    x_origin : float
        Time of sample 0 relative to the trigger, s (negative when the record starts before it).
    y_scale : float
        Volts per code (non-zero).
    y_offset : float
        Volts at code 0.
    """

    x_increment: float
    x_origin: float
    y_scale: float
    y_offset: float


def parse_scaling(values: Iterable[float]) -> WaveformScaling:
    """The four numbers of a ``waveform_scaling`` reply, checked.

    Raises
    ------
    ReplyError
        Not four finite numbers, an x increment that is not positive, or a zero y scale.
    """
    v = [float(x) for x in np.asarray(values, dtype=np.float64).ravel()]
    if len(v) != len(SCALING_FIELDS):
        raise ReplyError(
            f"expected {len(SCALING_FIELDS)} scaling values ({', '.join(SCALING_FIELDS)}), got {len(v)}"
        )
    bad = [name for name, x in zip(SCALING_FIELDS, v) if not math.isfinite(x)]
    if bad:
        raise ReplyError(f"scaling value(s) {', '.join(bad)} not finite: {v}")
    scaling = WaveformScaling(*v)
    if not scaling.x_increment > 0:
        raise ReplyError(f"x_increment {scaling.x_increment!r} s: expected seconds per sample > 0")
    if scaling.y_scale == 0:
        raise ReplyError("y_scale 0 V per code: every code would read the same voltage")
    return scaling


@dataclass(frozen=True, eq=False)
class Waveform:
    """One channel's record of one acquisition.

    Attributes
    ----------
    channel : int
        The scope's channel number.
    name : str
        Its name (option ``channel_names``; ``ch<n>`` when it has none).
    x0 : float
        Time of the first sample relative to the trigger, s.
    dx : float
        Seconds between samples.
    volts : numpy.ndarray
        Shape ``(n,)``, float64 volts.
    """

    channel: int
    name: str
    x0: float
    dx: float
    volts: np.ndarray

    @property
    def n(self) -> int:
        return int(self.volts.size)

    @property
    def times(self) -> np.ndarray:
        """Time of each sample relative to the trigger, s: ``x0 + k * dx``."""
        return self.x0 + self.dx * np.arange(self.volts.size, dtype=np.float64)


def scale_codes(codes: np.ndarray, scaling: WaveformScaling, channel: int, name: str) -> Waveform:
    """A channel's codes and scaling as a `Waveform` (``volts = code * y_scale + y_offset``)."""
    volts = np.asarray(codes, dtype=np.float64) * scaling.y_scale + scaling.y_offset
    return Waveform(channel, name, scaling.x_origin, scaling.x_increment, volts)


@dataclass(frozen=True, eq=False)
class Acquisition:
    """One armed, triggered and read acquisition.

    Attributes
    ----------
    t_arm : float
        Host clock just before the arm command was sent, s.
    t_complete : float
        Host clock just after the scope first reported the acquisition complete, s. The
        trigger (the last one, when averaging) fell between `t_arm` and `t_complete`.
    averages : int or None
        Triggers averaged into each record (1: single); None when the driver did not set it.
    waveforms : tuple of Waveform
        One per channel read, in the order of the option ``channels``.
    """

    t_arm: float
    t_complete: float
    averages: int | None
    waveforms: tuple[Waveform, ...]

    @property
    def channel_names(self) -> tuple[str, ...]:
        return tuple(w.name for w in self.waveforms)

    def __getitem__(self, name: str) -> Waveform:
        """The waveform of the channel called ``name``."""
        for w in self.waveforms:
            if w.name == name:
                return w
        raise KeyError(f"no channel named {name!r}; channels: {', '.join(self.channel_names)}")


class Scope(Driver):
    """Triggered oscilloscope: single or averaged acquisitions read as scaled waveforms."""

    DRIVER_NAME = "scope"
    ROLE = "detector"
    OPTIONS = frozenset({"channels", "channel_names", "averages", "completion_timeout"})

    def __init__(self, session, options=None) -> None:
        super().__init__(session, options)
        missing = [
            op for op in ("arm", "complete", "fetch_waveform", "waveform_scaling") if not session.has(op)
        ]
        if missing:
            raise DriverConfigError(
                f"instruments.{session.role}.profile: profile {self.profile_name} lacks "
                f"{', '.join('commands.' + op for op in missing)}, which the scope driver needs"
            )
        if session.profile.command("fetch_waveform").scale != 1.0:
            raise ProfileError(
                session.profile.path,
                "commands.fetch_waveform.scale",
                "the scope driver scales codes with waveform_scaling (y_scale, y_offset); remove the scale",
            )
        self.names_by_channel: dict[int, str] = self._option_channel_names(DEFAULT_CHANNEL_NAMES)
        self.channels: tuple[int, ...] = self._option_channels()
        self.averages: int | None = self._option_averages()
        timeout = self._option_quantity("completion_timeout", "time", DEFAULT_COMPLETION_TIMEOUT)
        assert timeout is not None
        if not timeout > 0:
            raise DriverConfigError(
                f"{self._where('completion_timeout')}: {self.options['completion_timeout']!r} is not "
                'a time > 0 such as "5 s"'
            )
        self.completion_timeout_s: float = timeout

    # -- options -----------------------------------------------------------------------

    def _option_channels(self) -> tuple[int, ...]:
        value = self.options.get("channels", sorted(self.names_by_channel))
        if isinstance(value, (str, bytes)) or not isinstance(value, (list, tuple)) or not value:
            raise DriverConfigError(
                f"{self._where('channels')}: expected a list of channel numbers such as [1, 2], got {value!r}"
            )
        for c in value:
            if isinstance(c, bool) or not isinstance(c, int) or c < 1:
                raise DriverConfigError(f"{self._where('channels')}: {c!r} is not a channel number >= 1")
        if len(set(value)) != len(value):
            raise DriverConfigError(f"{self._where('channels')}: {list(value)} names a channel twice")
        return tuple(int(c) for c in value)

    def _option_averages(self) -> int | None:
        if "averages" not in self.options:
            return None
        value = self.options["averages"]
        if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_AVERAGES:
            raise DriverConfigError(
                f"{self._where('averages')}: {value!r} is not a whole number of triggers "
                f"from 1 (single) to {MAX_AVERAGES}"
            )
        if value > 1 and not self.session.has("set_averages"):
            raise DriverConfigError(
                f"{self._where('averages')}: profile {self.profile_name} cannot set the averaging "
                "(commands.set_averages); remove the option or add the command"
            )
        if value == 1 and not (self.session.has("single") or self.session.has("set_averages")):
            raise DriverConfigError(
                f"{self._where('averages')}: profile {self.profile_name} can select neither single "
                "acquisitions (commands.single) nor the averaging (commands.set_averages)"
            )
        return value

    # -- settings ----------------------------------------------------------------------

    @property
    def channel_names(self) -> tuple[str, ...]:
        """Names of the channels `fetch` reads, in the order of the option ``channels``."""
        return tuple(self.names_by_channel.get(c, f"ch{c}") for c in self.channels)

    def configure(self, averages: int | None = None) -> None:
        """Select single (``averages`` 1) or averaged acquisitions, falling back to the option
        ``averages``; with neither, the instrument's setting is left as it is."""
        n = self.averages if averages is None else averages
        if n is None:
            return
        self.set_averages(n)

    def set_averages(self, n: int) -> None:
        """Average ``n`` triggers into each acquisition; 1 selects single acquisitions (the
        profile's ``single`` when it has one, else ``set_averages`` with 1)."""
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or not 1 <= n <= MAX_AVERAGES:
            raise ValueError(f"n: expected a whole number of triggers from 1 to {MAX_AVERAGES}, got {n!r}")
        if n == 1 and self.session.has("single"):
            self.session.write("single")
        else:
            self.session.write("set_averages", value=float(n))
        self.averages = int(n)

    def read_averages(self) -> int:
        """Triggers the instrument averages into each acquisition (its ``averages`` query)."""
        return int(self.session.query("averages"))

    # -- one acquisition ---------------------------------------------------------------

    def arm(self) -> None:
        """Arm the trigger: the next trigger(s) start the acquisition."""
        self.session.write("arm")

    def is_complete(self) -> bool:
        """Whether the armed acquisition is complete."""
        return bool(self.session.query("complete"))

    def wait_complete(
        self, timeout_s: float | None = None, clock: Callable[[], float] = time.monotonic
    ) -> float:
        """Ask ``complete`` until it says so; returns ``clock()`` just after that reply.

        Raises
        ------
        InstrumentTimeout
            Not complete within ``timeout_s`` (default: the option ``completion_timeout``).
        """
        limit = self.completion_timeout_s if timeout_s is None else float(timeout_s)
        if not (math.isfinite(limit) and limit > 0):
            raise ValueError(f"timeout_s: expected seconds > 0, got {timeout_s!r}")
        end = time.monotonic() + limit
        while True:
            done = self.is_complete()
            if done:
                return clock()
            left = end - time.monotonic()
            if left <= 0:
                raise InstrumentTimeout(
                    f"the acquisition was not complete within {limit:g} s (commands.complete "
                    "kept answering no): is the trigger input connected to the pump's trigger, "
                    "and is the pump pulsing? (option completion_timeout sets the wait)",
                    role=self.role,
                    resource=self.resource,
                )
            time.sleep(min(COMPLETE_POLL_S, left))

    def scaling(self, n: int) -> WaveformScaling:
        """Channel ``n``'s scaling (``waveform_scaling``)."""
        channel = _check_channel(n)
        try:
            return parse_scaling(self.session.query("waveform_scaling", n=channel))
        except ReplyError as exc:
            raise self._with_context(exc, "waveform_scaling", channel) from None

    def record_length(self, n: int) -> int | None:
        """Samples in channel ``n``'s record (None if the profile cannot ask)."""
        if not self.session.has("record_length"):
            return None
        return int(self.session.query("record_length", n=_check_channel(n)))

    def fetch_waveform(self, n: int) -> Waveform:
        """Channel ``n``'s record of the last acquisition, in volts with its times.

        Raises
        ------
        ReplyError
            An empty record, a record of another length than ``record_length`` says (when the
            profile can ask), a block cut short (`drivers.errors.TruncatedBlock`) or garbled,
            or a bad scaling.
        """
        channel = _check_channel(n)
        name = self.names_by_channel.get(channel, f"ch{channel}")
        scaling = self.scaling(channel)
        expected = self.record_length(channel)
        codes = self.session.query("fetch_waveform", n=channel)
        if codes.size == 0:
            raise self._with_context(
                ReplyError(f"channel {channel} ({name}): the waveform holds no samples"),
                "fetch_waveform",
                channel,
            )
        if expected is not None and codes.size != expected:
            raise self._with_context(
                ReplyError(
                    f"channel {channel} ({name}): expected {expected} samples (record_length), "
                    f"got {codes.size}"
                ),
                "fetch_waveform",
                channel,
            )
        return scale_codes(codes, scaling, channel, name)

    def fetch(self, channels: Iterable[int] | None = None) -> tuple[Waveform, ...]:
        """The records of ``channels`` (default: the option ``channels``), in that order."""
        chans = self.channels if channels is None else tuple(channels)
        return tuple(self.fetch_waveform(c) for c in chans)

    def acquire(
        self, averages: int | None = None, clock: Callable[[], float] = time.monotonic
    ) -> Acquisition:
        """Arm one acquisition (single, or the mean of ``averages`` triggers), wait for it and
        read every channel; time-stamped with ``clock()`` at the arm and at complete."""
        if averages is not None:
            self.set_averages(averages)
        t_arm = clock()
        self.arm()
        t_complete = self.wait_complete(clock=clock)
        return Acquisition(t_arm, t_complete, self.averages, self.fetch())

    # -- clock and simulator ------------------------------------------------------------

    def clock(self) -> float:
        """Seconds since the instrument's acquisition started (``clock``)."""
        return float(self.session.query("clock"))

    def sim_truth(self) -> dict[str, float]:
        """The simulated bench's true state (simulator-only ``SIM:TRUTH?``), by field name,
        with its latest pump pulse's (``sim_pulse_truth``) when the profile asks for it."""
        out = {}
        for op, fields in (("sim_truth", SIM_TRUTH_FIELDS), ("sim_pulse_truth", SIM_PULSE_FIELDS)):
            if op == "sim_pulse_truth" and not self.session.has(op):
                continue
            values = np.asarray(self.session.query(op), dtype=np.float64)
            if values.size != len(fields):
                raise ReplyError(
                    f"expected {len(fields)} truth values ({', '.join(fields)}), got {values.size}",
                    role=self.role,
                    resource=self.resource,
                )
            out.update({name: float(v) for name, v in zip(fields, values)})
        return out

    # -- helpers -----------------------------------------------------------------------

    def _with_context(self, exc: ReplyError, op: str, channel: int) -> ReplyError:
        sent = self.session.profile.command(op).send.format(n=channel)
        return exc.with_context(role=self.role, resource=self.resource, command=sent)  # type: ignore[return-value]


def _check_channel(n: object) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"n: expected a channel number >= 1, got {n!r}")
    return int(n)
