"""Waiting on a condition with a deadline (tests never sleep a fixed time)."""

from __future__ import annotations

import time


def wait_until(condition, timeout: float, what: str) -> None:
    """Return once ``condition()`` is true; AssertionError naming ``what`` after ``timeout`` s."""
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        time.sleep(0.01)
