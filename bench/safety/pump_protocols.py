"""What the guard needs from the instruments, and how performing its actions went.

`PumpOutput` and `Shutter` are the protocols a pump driver and a shutter controller meet for
`bench.safety.guarded_pump.GuardedPump`; `OffReport` says how one off command went.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

from bench.records import Event


@runtime_checkable
class PumpOutput(Protocol):
    """What the guard needs from a pump driver (drivers.instruments.pump.PumpDriver has these)."""

    def output(self, on: bool) -> None: ...

    def output_is_on(self) -> bool: ...

    def interlock_closed(self) -> bool: ...

    def mount_temperature(self) -> float: ...

    def measured_current(self) -> float: ...

    def current_setpoint(self) -> float: ...

    def set_current(self, current: float) -> None: ...


@runtime_checkable
class Shutter(Protocol):
    """A shutter controller with named shutters (``"pump"``: the shutter in the pump beam)."""

    def close_shutter(self, name: str) -> None: ...

    def open_shutter(self, name: str) -> None: ...


@dataclass(frozen=True)
class OffReport:
    """How one off command went: success, attempts, when it completed (run clock), errors."""

    ok: bool
    attempts: int
    done_at: float | None
    error: str = ""


@dataclass
class Performed:
    """What performing one outcome's actions did (`GuardedPump` internal)."""

    off: OffReport | None = None
    faults: list[Event] = field(default_factory=list)
    failed: tuple[str, str, float] | None = None  # (condition, reason, time) for a follow-up trip
