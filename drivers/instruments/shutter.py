"""Shutter role: a controller of named shutters (``probe``, ``pump``), optionally chopping.

Names map to the controller's shutter numbers through the ``shutters`` option (the profile's
``[options]`` gives the default, the bench file may override it).

A closed pump shutter is a second layer only; it never replaces the hardware interlock.
"""

from __future__ import annotations

from drivers.base import Driver, check_finite
from drivers.errors import DriverConfigError

DEFAULT_SHUTTERS = {"probe": 1, "pump": 2}


class ShutterController(Driver):
    """Controller of named shutters (probe, pump), with optional chopping.

    `open_shutter`, `close_shutter`, `is_open` and `chop` take a shutter's name; `close`
    releases the connection only, as for every driver.
    """

    DRIVER_NAME = "shutter"
    ROLE = "shutter"
    OPTIONS = frozenset({"shutters"})

    def __init__(self, session, options=None) -> None:
        super().__init__(session, options)
        table = self.options.get("shutters", DEFAULT_SHUTTERS)
        if not isinstance(table, dict) or not table:
            raise DriverConfigError(
                f"{self._where('shutters')}: expected a table such as {{ probe = 1, pump = 2 }}"
            )
        numbers: dict[str, int] = {}
        for name, number in table.items():
            if isinstance(number, bool) or not isinstance(number, int) or number < 0:
                raise DriverConfigError(
                    f"{self._where('shutters')}.{name}: expected a shutter number, got {number!r}"
                )
            numbers[str(name)] = number
        self.shutters: dict[str, int] = numbers

    def _number(self, name: str) -> int:
        try:
            return self.shutters[name]
        except (KeyError, TypeError):
            raise ValueError(f"name: unknown shutter {name!r}; known: {', '.join(self.shutters)}") from None

    def open_shutter(self, name: str) -> None:
        """Open shutter ``name``."""
        self.session.write("open", n=self._number(name))

    def close_shutter(self, name: str) -> None:
        """Close shutter ``name``. (`close`, as for every driver, releases the connection and
        moves no shutter.)"""
        self.session.write("close", n=self._number(name))

    def is_open(self, name: str) -> bool:
        """Whether shutter ``name`` is open."""
        return bool(self.session.query("state", n=self._number(name)))

    def chop(self, name: str, hz: float) -> None:
        """Chop shutter ``name`` at ``hz`` (0 stops chopping and leaves it open)."""
        self.session.write("chop", n=self._number(name), hz=check_finite("hz", hz, minimum=0.0))
