"""bench.run.stop_signals: the first ending signal ends the command, later ones cannot interrupt.

Signals are sent to this very process (os.kill) and are handled in the main thread, where
pytest runs the tests; each test waits on the handler's effect with a deadline.
"""

from __future__ import annotations

import os
import signal
import time

import pytest

from bench.errors import Terminated
from bench.run import stop_signals


def _deliver_now(sig: int) -> None:
    """Send ``sig`` to this process and give the interpreter the chance to run its handler."""
    os.kill(os.getpid(), sig)
    deadline = time.monotonic() + 0.2
    while time.monotonic() < deadline:  # the handler runs between bytecodes of this loop
        pass


def test_a_signal_inside_a_shield_is_held_and_raised_after_it():
    reached_end = False
    with pytest.raises(KeyboardInterrupt):
        with stop_signals.shielded():
            _deliver_now(signal.SIGINT)
            reached_end = True  # not interrupted inside
    assert reached_end


def test_after_the_first_signal_later_ones_are_only_noted(capsys):
    previous = stop_signals.install()
    try:
        with pytest.raises(KeyboardInterrupt):
            _deliver_now(signal.SIGINT)
        assert stop_signals.stopping()
        _deliver_now(signal.SIGINT)  # must not raise
        _deliver_now(signal.SIGTERM)
        assert "please wait" in capsys.readouterr().err
    finally:
        stop_signals.restore(previous)


def test_sigterm_first_raises_terminated():
    previous = stop_signals.install()
    try:
        with pytest.raises(Terminated):
            _deliver_now(signal.SIGTERM)
    finally:
        stop_signals.restore(previous)
