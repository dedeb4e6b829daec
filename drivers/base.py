"""What every role driver shares: its session, options, identity, errors, stats and close()."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, ClassVar

from drivers.errors import DriverConfigError
from drivers.ieee488 import ErrorEntry, Identity
from drivers.session import InstrumentStats, Session

#: Options every driver accepts (used by `drivers.registry.open_instrument`).
COMMON_OPTIONS = frozenset({"visa_backend"})


class Driver:
    """Base of the role drivers; subclasses set ``DRIVER_NAME``, ``ROLE`` and ``OPTIONS``.

    Parameters
    ----------
    session : Session
        The exchange loop to the instrument.
    options : mapping
        Driver options: the profile's ``[options]`` overlaid with the bench file's.
    """

    #: Profile role this driver needs.
    ROLE: ClassVar[str] = ""
    #: Name it is registered under (a driver in ``drivers/instruments/`` sets it; the
    #: `drivers.registry.register` decorator sets it for a driver defined elsewhere).
    DRIVER_NAME: ClassVar[str] = ""
    #: Option names this driver understands.
    OPTIONS: ClassVar[frozenset[str]] = frozenset()

    def __init__(self, session: Session, options: Mapping[str, Any] | None = None) -> None:
        self.session = session
        self.options = dict(options or {})
        known = self.OPTIONS | COMMON_OPTIONS
        for name in self.options:
            if name not in known:
                raise DriverConfigError(
                    f"{self._where(name)}: unknown option for the {self.DRIVER_NAME or self.ROLE} "
                    f"driver; expected one of {sorted(known)}"
                )

    # -- shared operations -------------------------------------------------------------

    @property
    def role(self) -> str:
        return self.session.role

    @property
    def resource(self) -> str:
        return self.session.resource

    @property
    def profile_name(self) -> str:
        return self.session.profile.name

    @property
    def stats(self) -> InstrumentStats:
        """Health counters of the connection (a snapshot)."""
        return self.session.stats

    def identify(self) -> Identity:
        """The instrument's identity (``*IDN?`` or the profile's equivalent)."""
        reply = self.session.query("identify")
        if isinstance(reply, Identity):
            return reply
        return Identity(maker="", model=str(reply), serial="", firmware="")

    def reset(self) -> None:
        """Reset to the power-on state (``*RST``), if the profile defines it."""
        self.session.write("reset")

    def instrument_errors(self) -> list[ErrorEntry]:
        """Drain and return the instrument's error queue (empty if it has none)."""
        return self.session.drain_errors()

    def close(self) -> None:
        """Release the connection."""
        self.session.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.role!r}, {self.resource!r}, profile={self.profile_name!r})"

    # -- helpers for subclasses --------------------------------------------------------

    def _where(self, name: str) -> str:
        return f"instruments.{self.session.role}.options.{name}"

    def _option_channel_names(self, default: dict[int, str]) -> dict[int, str]:
        """Option ``channel_names`` (``{ 1 = "probe", 2 = "reference" }``): channel number -> the
        name of its column, checked, or ``default``."""
        value = self.options.get("channel_names", default)
        if not isinstance(value, dict):
            raise DriverConfigError(
                f'{self._where("channel_names")}: expected a table such as {{ 1 = "probe" }}'
            )
        names: dict[int, str] = {}
        for key, name in value.items():
            try:
                number = int(key)
            except (TypeError, ValueError):
                raise DriverConfigError(
                    f"{self._where('channel_names')}.{key}: expected a channel number"
                ) from None
            if not isinstance(name, str) or not name.strip():
                raise DriverConfigError(f"{self._where('channel_names')}.{key}: expected a channel name")
            names[number] = name.strip()
        return names

    def _option_quantity(self, name: str, kind: str, default: float | None) -> float | None:
        """Option ``name`` as an SI float: a number (already SI) or text with a unit (``"100 kHz"``)."""
        if name not in self.options:
            return default
        value = self.options[name]
        if isinstance(value, bool):
            raise DriverConfigError(f"{self._where(name)}: {value!r} is not a number")
        if isinstance(value, (int, float)):
            number = float(value)
        else:
            from drivers.units import parse_quantity  # pint is imported only when a unit is read

            number = parse_quantity(value, kind, self._where(name))
        if not math.isfinite(number):
            raise DriverConfigError(f"{self._where(name)}: {value!r} is not a finite number")
        return number


def check_finite(name: str, value: Any, *, minimum: float | None = None, positive: bool = False) -> float:
    """``value`` as a float; ValueError naming ``name`` if not finite, negative or not positive."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"{name}: expected a number, got {value!r}")
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"{name}: expected a finite number, got {value!r}")
    if positive and v <= 0:
        raise ValueError(f"{name}: expected a number > 0, got {value!r}")
    if minimum is not None and v < minimum:
        raise ValueError(f"{name}: expected a number >= {minimum}, got {value!r}")
    return v
