"""The pump driver as the guard reaches it: its commands go before the pump reader's polling.

`PumpAccess` is shared by the guard and the pump reader: while a guard command is waiting or
running, the reader starts no new query. `GuardPumpPort` is the pump driver behind it, with
exactly the methods of the guard's `bench.safety.pump_protocols.PumpOutput`.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Iterator


class PumpAccess:
    """Lets the guard's pump commands go before the pump reader's polling.

    The guard talks to the pump through `urgent`: while a guard command is waiting or running,
    the reader does not start another query, so an off command waits for at most the one
    exchange already on the wire, not for a whole poll (and not for an unfair lock).
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._urgent = 0
        self._idle = threading.Condition(self._lock)

    @contextlib.contextmanager
    def urgent(self) -> Iterator[None]:
        """While inside, the reader starts no new query (the guard's command goes first)."""
        with self._lock:
            self._urgent += 1
        try:
            yield
        finally:
            with self._lock:
                self._urgent -= 1
                if self._urgent == 0:
                    self._idle.notify_all()

    def wait_for_turn(self, timeout: float = 1.0) -> None:
        """Called by the reader before each query: wait while a guard command is pending."""
        with self._lock:
            if self._urgent:
                self._idle.wait_for(lambda: self._urgent == 0, timeout)


class GuardPumpPort:
    """The pump driver as the guard sees it: every call marked urgent (see `PumpAccess`)."""

    def __init__(self, pump, access: PumpAccess):
        self._pump = pump
        self._access = access

    # exactly the methods of the guard's PumpOutput protocol: nothing else reaches the driver here
    def output(self, on: bool) -> None:
        with self._access.urgent():
            self._pump.output(on)

    def output_is_on(self) -> bool:
        with self._access.urgent():
            return self._pump.output_is_on()

    def interlock_closed(self) -> bool:
        with self._access.urgent():
            return self._pump.interlock_closed()

    def mount_temperature(self) -> float:
        with self._access.urgent():
            return self._pump.mount_temperature()

    def measured_current(self) -> float:
        with self._access.urgent():
            return self._pump.measured_current()

    def current_setpoint(self) -> float:
        with self._access.urgent():
            return self._pump.current_setpoint()

    def set_current(self, current: float) -> None:
        with self._access.urgent():
            self._pump.set_current(current)
