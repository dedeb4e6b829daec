"""Error codes of the simulated instruments and the per-instrument error queue.

Negative codes are the standard SCPI ones (SCPI-99 vol. 2, ch. 21); positive codes are the
instruments' own, listed in COMMANDS.md. The model raises `DeviceError` when a command is
refused (e.g. switching the pump on with the interlock open); the SCPI layer pushes it to the
instrument's `ErrorQueue`, which holds `QUEUE_SIZE` entries and, like a SCPI instrument, replaces
the newest entry with -350 when it overflows.

References
----------
.. [1] SCPI Consortium, *Standard Commands for Programmable Instruments*, vol. 2, 1999,
   ch. 21 (error/event queue and error codes).
"""

from __future__ import annotations

import threading
from collections import deque

QUEUE_SIZE = 16

MESSAGES: dict[int, str] = {
    0: "No error",
    -100: "Command error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -113: "Undefined header",
    -221: "Settings conflict",
    -222: "Data out of range",
    -224: "Illegal parameter value",
    -350: "Queue overflow",
    101: "Input over range",
    201: "Interlock open",
    202: "Over temperature",
    300: "Device fault",
}

COMMAND_ERROR = -100
PARAMETER_NOT_ALLOWED = -108
MISSING_PARAMETER = -109
UNDEFINED_HEADER = -113
SETTINGS_CONFLICT = -221
OUT_OF_RANGE = -222
ILLEGAL_VALUE = -224
QUEUE_OVERFLOW = -350
INPUT_OVER_RANGE = 101
INTERLOCK_OPEN = 201
OVER_TEMPERATURE = 202
DEVICE_FAULT = 300


class DeviceError(ValueError):
    """A refused command or a bad value, with its SCPI-style code (a ValueError for callers)."""

    def __init__(self, code: int, detail: str = ""):
        self.code = code
        self.detail = detail
        super().__init__(f"{code},{MESSAGES.get(code, 'Device error')}" + (f" ({detail})" if detail else ""))


class ErrorQueue:
    """First-in first-out error queue of one instrument (thread-safe)."""

    def __init__(self, size: int = QUEUE_SIZE):
        if size < 2:
            raise ValueError(f"size: expected at least 2, got {size!r}")
        self._size = size
        self._items: deque[int] = deque()
        self._lock = threading.Lock()

    def push(self, code: int) -> None:
        with self._lock:
            if len(self._items) >= self._size:
                self._items[-1] = QUEUE_OVERFLOW
            else:
                self._items.append(code)

    def pop(self) -> tuple[int, str]:
        with self._lock:
            code = self._items.popleft() if self._items else 0
        return code, MESSAGES.get(code, "Device error")

    def clear(self) -> None:
        with self._lock:
            self._items.clear()

    def __len__(self) -> int:
        return len(self._items)


def format_error(code: int, text: str) -> str:
    """``-113,"Undefined header"`` (the reply of SYST:ERR?)."""
    return f'{code},"{text}"'
