"""Signals that end a command (Ctrl-C, SIGTERM, SIGHUP), and shielding the shutdown from them.

The first such signal ends the command: SIGINT raises `KeyboardInterrupt`, SIGTERM and SIGHUP
raise `bench.errors.Terminated`. Once that has happened, the process is stopping: a further
signal must not interrupt the pump-off command, its read-back or the closing of the run file,
so it is only noted (and a line on standard error says to wait). `shielded` does the same for
a block of code (`bench.run.measurement.Measurement.close`) also in programs that did not call
`install`: signals arriving inside it are held and delivered to the previous handlers once the
block has finished.

Imports are shielded too (`bench.cli` builds its parser, `record` loads the measurement code
inside `shielded`): an exception raised in the middle of an import leaves half-made modules
behind, and under ``python -m`` a `KeyboardInterrupt` raised inside code that an import runs
through ``exec`` (dataclasses, named tuples) makes CPython end the process by SIGINT even
after the command has handled it and returned its status.

Signal handlers can only be set in the main thread; elsewhere both functions do nothing.
Windows has SIGINT (Ctrl-C) and SIGTERM but no SIGHUP; the names missing on a platform are
skipped.
"""

from __future__ import annotations

import contextlib
import signal
import sys
import threading
from collections.abc import Iterator

from bench.errors import Terminated

#: The signals that end a command, by name (those the platform lacks are skipped).
ENDING_SIGNALS = ("SIGINT", "SIGTERM", "SIGHUP")

_stopping = False
_shield_depth = 0
_held: list[int] = []


def _signals() -> list[int]:
    return [getattr(signal, name) for name in ENDING_SIGNALS if hasattr(signal, name)]


def _in_main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


def stopping() -> bool:
    """True once a signal has ended the command (further ones are only noted)."""
    return _stopping


_notes: list[str | None] = []  # what each active shield says of a signal it holds


def _say_wait(signum: int) -> None:
    if _stopping:
        text = "received while stopping; the pump is being switched off and the run closed, please wait"
    elif _notes and _notes[-1]:
        text = f"noted; it takes effect once {_notes[-1]}"
    else:
        return
    try:
        print(f"gainbench: {signal.Signals(signum).name} {text}", file=sys.stderr, flush=True)
    except (OSError, ValueError):  # no usable stderr: the wait goes on all the same
        pass


def _ending(signum: int, frame: object) -> None:
    """The handler `install` sets: the first signal ends the command, later ones are noted."""
    global _stopping
    if _stopping or _shield_depth:
        if _shield_depth and not _stopping:
            _held.append(signum)
        _say_wait(signum)
        return
    _stopping = True
    if signum == signal.SIGINT:
        raise KeyboardInterrupt
    raise Terminated(signal.Signals(signum).name)


def install() -> list[tuple[int, object]]:
    """Set `_ending` for SIGINT, SIGTERM and SIGHUP; returns the previous handlers for `restore`."""
    global _stopping
    if not _in_main_thread():
        return []
    _stopping = False
    return [(sig, signal.signal(sig, _ending)) for sig in _signals()]


def restore(previous: list[tuple[int, object]]) -> None:
    """Put back the handlers `install` returned."""
    for sig, handler in previous:
        with contextlib.suppress(ValueError, TypeError):
            signal.signal(sig, handler)  # type: ignore[arg-type]


def _holding(signum: int, frame: object) -> None:
    if not _stopping:
        _held.append(signum)
    _say_wait(signum)


@contextlib.contextmanager
def shielded(note: str | None = None) -> Iterator[None]:
    """Hold ending signals while the block runs; afterwards deliver the first one held.

    A signal held is delivered to the handler that was set before the block (so with the
    default Ctrl-C handler, `KeyboardInterrupt` is raised after the block). Nothing is
    delivered when the command is already stopping (`install`'s handler has ended it).
    ``note`` (e.g. ``"the run is closed"``) is said on standard error when a signal is held.
    """
    global _shield_depth
    if not _in_main_thread():
        yield
        return
    previous = [(sig, signal.getsignal(sig)) for sig in _signals()]
    _shield_depth += 1
    _notes.append(note)
    try:
        for sig, handler in previous:
            if handler is not _ending:  # `_ending` already holds while shielded
                signal.signal(sig, _holding)
        yield
    finally:
        _shield_depth -= 1
        _notes.pop()
        if _shield_depth == 0:
            restore(previous)
            held = list(_held)
            _held.clear()
            if held and not _stopping:
                _deliver(held[0], dict(previous))


def _deliver(signum: int, handlers: dict[int, object]) -> None:
    handler = handlers.get(signum)
    if callable(handler):
        handler(signum, None)
    elif handler == signal.SIG_DFL:
        signal.raise_signal(signum)
