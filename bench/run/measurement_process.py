"""The bench in a process of its own, for the dashboard: `RemoteMeasurement`.

The interpreter runs one thread at a time. With the dashboard in the same process as the
readers, the consumer and the guard's checks, the drawing of the screen and the acquisition
take turns on one core: at a million sample sets a second the screen falls behind and the
readers wait for it. `RemoteMeasurement` runs the `Measurement` (instruments, guard, run
store) in a child process and offers the dashboard the same methods, so each side has an
interpreter and a core of its own.

Protocol, over a `multiprocessing` pipe: the dashboard sends ``(id, method, args, kwargs)``;
the bench process answers ``(id, True, value)`` or ``(id, False, error)``. Each request runs
in a thread of its own in the bench process, so switching the pump off never waits behind a
dark capture or a sweep step. Only the methods in `METHODS` can be called.

Safety. The guard, and everything that commands the pump, live in the bench process. When the
dashboard process goes away for any reason (quit, crash, ``kill -9``), the pipe closes and the
bench process switches the pump off and closes the run file. The bench process ignores
Ctrl-C and a closed terminal (they reach the dashboard too, whose end then ends the bench
process); SIGTERM closes it as a quit does (pump off, run closed). If the bench process
itself dies, every call raises `BenchProcessError` and the dashboard says so; the pump is then
in whatever state the bench process left it (as after a crash of any control program: the
hardware interlock is what protects people).
"""

from __future__ import annotations

import atexit
import contextlib
import copyreg
import logging
import multiprocessing
import os
import pickle
import signal
import sys
import threading
import time
from collections.abc import Callable, Mapping
from pathlib import Path
from types import MappingProxyType
from typing import Any

from bench.config import BenchConfig, load_bench_text
from bench.errors import GainbenchError
from bench.run.readers import RunClock

log = logging.getLogger(__name__)

#: What the dashboard may call on the bench process's `Measurement`.
METHODS = frozenset(
    {
        "snapshot",
        "capture_dark",
        "capture_baseline",
        "capture_background",
        "set_modulation",
        "set_mode",
        "set_current",
        "emit",
        "stop_emission",
        "acknowledge",
        "note",
        "pump_readings",
        "arm",
    }
)

#: s to wait for the bench process to open the instruments, and to close everything.
OPEN_TIMEOUT = 60.0
CLOSE_TIMEOUT = 60.0


class BenchProcessError(GainbenchError):
    """The bench process cannot be reached, or an error it raised could not be passed on."""


def read_only(mapping: dict) -> MappingProxyType:
    """A read-only view of ``mapping`` (how one crosses the pipe back into a mappingproxy)."""
    return MappingProxyType(mapping)


# Snapshots, estimates and events hold read-only mappings; they cross the pipe as dicts.
copyreg.pickle(MappingProxyType, lambda m: (read_only, (dict(m),)))


# ==============================================================================================
# the bench process
# ==============================================================================================


class _Terminated(Exception):
    """SIGTERM reached the bench process: close as on a quit (pump off, run closed)."""


def _on_sigterm(signum, frame) -> None:
    raise _Terminated("terminated (SIGTERM)")


def _serve(
    conn,
    bench_text: str,
    bench_source: str,
    overrides: dict[str, str] | None,
    options: dict[str, Any],
    log_path: str | None,
) -> None:
    """Main function of the bench process."""
    # Ctrl-C and a closed terminal (SIGHUP) reach the whole process group: the dashboard
    # handles them, and its end (the pipe closing) ends this process, pump off first.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "SIGHUP"):
        signal.signal(signal.SIGHUP, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, _on_sigterm)
    if log_path is not None:  # the dashboard owns the terminal: messages go to a file
        with contextlib.suppress(OSError):
            fd = os.open(log_path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
            os.dup2(fd, 1)
            os.dup2(fd, 2)
            os.close(fd)
            sys.stdout = os.fdopen(1, "w", buffering=1, closefd=False)
            sys.stderr = os.fdopen(2, "w", buffering=1, closefd=False)
    logging.basicConfig(level=logging.WARNING, format="%(asctime)s %(name)s: %(message)s", stream=sys.stderr)
    from bench.run.measurement import Measurement

    send_lock = threading.Lock()

    def send(message) -> None:
        with send_lock:
            try:
                conn.send(message)
            except (OSError, pickle.PicklingError, TypeError, AttributeError) as exc:
                if isinstance(exc, OSError):
                    return  # the dashboard is gone; the loop below sees it too
                conn.send((message[0], False, BenchProcessError(f"reply could not be sent: {exc!r}")))

    m: Measurement | None = None
    try:
        cfg = load_bench_text(bench_text, bench_source, overrides=overrides or None)
        m = Measurement(cfg, **options)
        m.open()
    except BaseException as exc:  # tell the dashboard why (SIGTERM too); close what was opened
        send((0, False, _portable(exc)))
        if m is not None:
            m.close(reason="failed to start")
        return
    send((0, True, _info(m)))
    reason = "the dashboard process ended"
    try:
        while True:
            try:
                request = conn.recv()
            except (EOFError, OSError):
                break  # the dashboard is gone: pump off, run closed (below)
            except _Terminated as exc:
                reason = str(exc)
                break
            rid, name, args, kwargs = request
            if name == "close":
                reason = str(args[0]) if args else "stopped"
                break
            if name == "info":
                send((rid, True, _info(m)))
                continue
            threading.Thread(
                target=_call, args=(m, send, rid, name, args, kwargs), daemon=True, name=f"request-{name}"
            ).start()
    finally:
        signal.signal(signal.SIGTERM, signal.SIG_IGN)  # the pump goes off and the run closes first
        m.close(reason=reason)
        send((-1, True, _info(m)))  # closed: the run file is complete


def _call(m, send: Callable[[Any], None], rid: int, name: str, args, kwargs) -> None:
    try:
        if name not in METHODS:
            raise BenchProcessError(f"{name}: not a method the dashboard may call")
        value = getattr(m, name)(*args, **kwargs)
    except BaseException as exc:  # passed to the caller, as a local call would raise it
        send((rid, False, _portable(exc)))
    else:
        send((rid, True, value))


def _info(m) -> dict[str, Any]:
    stats = {}
    for role, inst in m.instruments.items():
        with contextlib.suppress(Exception):
            stats[role] = inst.stats
    gp = m.guarded_pump
    return {
        "run_id": m.run_id,
        "run_path": None if m.run_path is None else str(m.run_path),
        "clock_start": m.clock.start,
        "speed": m.speed,
        "open": m.is_open,
        "guard_state": None if gp is None else gp.state,
        "trip_reason": None if gp is None else gp.trip_reason,
        "stats": stats,
        "identities": dict(m.identities),
        "mode": m.mode,
    }


def _portable(exc: BaseException) -> BaseException:
    """``exc`` if it survives pickling, else a `BenchProcessError` with its text."""
    try:
        pickle.loads(pickle.dumps(exc))
        return exc
    except Exception:
        return BenchProcessError(f"{type(exc).__name__}: {exc}")


# ==============================================================================================
# the dashboard's side
# ==============================================================================================


class _GuardView:
    """The guard as the latest answer from the bench process showed it (state, trip reason)."""

    def __init__(self) -> None:
        self.state = "safe"
        self.trip_reason: str | None = None


class _RemoteStats:
    """One instrument's health counters, as the bench process last reported them."""

    def __init__(self, owner: RemoteMeasurement, role: str) -> None:
        self._owner, self._role = owner, role

    @property
    def stats(self):
        return self._owner.instrument_stats()[self._role]


class RemoteMeasurement:
    """A `Measurement` in a process of its own, with the methods the dashboard uses.

    Parameters are those of `Measurement` (the bench ``cfg`` and keyword options).
    ``bench_log`` is the file the bench process writes its messages to (default
    ``bench-process.log`` in the run directory).
    """

    def __init__(self, cfg: BenchConfig, *, bench_log: str | Path | None = None, **options: Any) -> None:
        if not isinstance(cfg, BenchConfig):
            raise ValueError(f"cfg: expected a BenchConfig, got {type(cfg).__name__}")
        self.cfg = cfg
        self.options = dict(options)
        self.mode = self.options.get("mode", "watch")
        self.record = bool(self.options.get("record", True))
        self.operator = self.options.get("operator", "") or cfg.run.operator
        self.speed = float(self.options.get("speed", 1.0)) if cfg.simulated else 1.0
        log_dir = Path(self.options.get("log_dir") or cfg.run.log_dir)
        self.bench_log = Path(bench_log) if bench_log is not None else log_dir / "bench-process.log"
        self.clock = RunClock(self.speed)
        self.guarded_pump: _GuardView | None = None
        self.instruments: dict[str, _RemoteStats] = {}
        self._info: dict[str, Any] = {}
        self._process = None
        self._conn = None
        self._send_lock = threading.Lock()
        self._pending: dict[int, list] = {}
        self._pending_lock = threading.Lock()
        self._next_id = 1
        self._receiver: threading.Thread | None = None
        self._gone: str | None = None
        self._closed = False
        self._stats_at = 0.0

    # -- life -------------------------------------------------------------------------------
    @property
    def is_open(self) -> bool:
        """The bench process has opened the bench and is not closed (as `Measurement.is_open`)."""
        return bool(self._info.get("open")) and not self._closed

    @property
    def run_id(self) -> str | None:
        return self._info.get("run_id")

    @property
    def run_path(self):
        p = self._info.get("run_path")
        return None if p is None else Path(p)

    @property
    def alive(self) -> bool:
        return self._process is not None and self._process.is_alive() and self._gone is None

    def start(self) -> None:
        """Start the bench process (it opens the bench at once); `open` waits for it.

        Call it before a full-screen app takes over the terminal: a process started afterwards
        would be handed the app's redirected output streams.
        """
        if self._process is not None:
            raise BenchProcessError("the bench process is already started")
        ctx = multiprocessing.get_context("spawn")  # a fresh interpreter: no threads or locks copied
        mine, theirs = ctx.Pipe(duplex=True)
        with contextlib.suppress(OSError):
            self.bench_log.parent.mkdir(parents=True, exist_ok=True)
        self._process = ctx.Process(
            target=_serve,
            name="gainbench-bench",
            daemon=False,
            args=(
                theirs,
                self.cfg.text,
                self.cfg.source,
                dict(self.cfg.overrides) or None,
                self.options,
                str(self.bench_log),
            ),
        )
        self._conn = mine
        self._process.start()
        theirs.close()
        atexit.register(self._hang_up)  # before multiprocessing waits for the child at exit

    def open(self) -> None:
        """Start the bench process if `start` was not called, and wait until its instruments
        and run file are open (or raise the error that stopped it)."""
        if self._process is None:
            self.start()
        if self._receiver is not None:
            raise BenchProcessError("the bench is already open")
        mine = self._conn
        if not mine.poll(OPEN_TIMEOUT):
            self._kill()
            raise BenchProcessError(f"the bench process did not open the bench within {OPEN_TIMEOUT:.0f} s")
        try:
            rid, ok, value = mine.recv()
        except (EOFError, OSError) as exc:
            self._kill()
            raise BenchProcessError(
                f"the bench process ended while opening the bench (see {self.bench_log})"
            ) from exc
        if not ok:
            self._process.join(CLOSE_TIMEOUT)
            raise value
        self._take_info(value)
        self.clock = RunClock(self.speed, start=value["clock_start"])  # one monotonic clock for both
        self.guarded_pump = _GuardView()
        self.guarded_pump.state = value["guard_state"] or "safe"
        self.instruments = {role: _RemoteStats(self, role) for role in value["stats"]}
        self._receiver = threading.Thread(target=self._receive, name="bench-replies", daemon=True)
        self._receiver.start()

    def close(self, reason: str = "stopped") -> None:
        """Pump off, run closed, bench process ended (the bench process does all three). Safe twice."""
        if self._closed or self._process is None or self._process.pid is None:
            self._closed = True
            return
        self._closed = True
        if self._gone is None:
            with contextlib.suppress(OSError), self._send_lock:
                self._conn.send((0, "close", (reason,), {}))
        self._process.join(CLOSE_TIMEOUT)
        if self._process.is_alive():
            log.error("the bench process did not end within %.0f s; stopping it", CLOSE_TIMEOUT)
            self._kill()
        with contextlib.suppress(OSError):
            self._conn.close()

    def __enter__(self) -> RemoteMeasurement:
        self.open()
        return self

    def __exit__(self, *exc) -> None:
        self.close("stopped" if exc[0] is None else f"exception {exc[0].__name__}")

    def _hang_up(self) -> None:
        """This process is ending without `close`: hang up, and the bench process switches the
        pump off and closes the run by itself."""
        if self._conn is not None:
            with contextlib.suppress(OSError):
                self._conn.close()

    def _kill(self) -> None:
        if self._process is not None and self._process.is_alive():
            self._process.kill()
            self._process.join(5.0)

    # -- calls ------------------------------------------------------------------------------
    def _request(self, name: str, *args: Any, **kwargs: Any) -> Any:
        if self._gone is not None:
            raise BenchProcessError(self._gone)
        if self._conn is None or self._closed:
            raise BenchProcessError("the bench process is not running")
        slot: list = [threading.Event(), None, None]
        with self._pending_lock:
            rid = self._next_id
            self._next_id += 1
            self._pending[rid] = slot
        try:
            with self._send_lock:
                self._conn.send((rid, name, args, kwargs))
        except OSError as exc:
            with self._pending_lock:
                self._pending.pop(rid, None)
            raise BenchProcessError(f"the bench process cannot be reached: {exc}") from exc
        slot[0].wait()
        if slot[1]:
            return slot[2]
        raise slot[2]

    def _receive(self) -> None:
        while True:
            try:
                rid, ok, value = self._conn.recv()
            except (EOFError, OSError):
                break
            if rid == -1:  # the bench process closed everything
                self._take_info(value)
                continue
            with self._pending_lock:
                slot = self._pending.pop(rid, None)
            if slot is not None:
                slot[1], slot[2] = ok, value
                slot[0].set()
        code = self._process.exitcode if self._process is not None else None
        self._gone = "the bench process has ended" + (
            ""
            if self._closed
            else f" unexpectedly (exit code {code}); the pump may still be on: switch it off at the driver "
            f"and see {self.bench_log}"
        )
        with self._pending_lock:
            slots, self._pending = list(self._pending.values()), {}
        for slot in slots:
            slot[1], slot[2] = False, BenchProcessError(self._gone)
            slot[0].set()

    def _take_info(self, info: Mapping[str, Any]) -> None:
        self._info = dict(info)
        if self.guarded_pump is not None and info.get("guard_state"):
            self.guarded_pump.state = info["guard_state"]
            self.guarded_pump.trip_reason = info.get("trip_reason")

    # -- the Measurement methods the dashboard uses ------------------------------------------
    def snapshot(self, with_history: bool = True):
        snap = self._request("snapshot", with_history=with_history)
        if self.guarded_pump is not None:
            self.guarded_pump.state = snap.guard_state
            self.guarded_pump.trip_reason = snap.trip_reason
        return snap

    def instrument_stats(self) -> dict[str, Any]:
        """The instruments' health counters (asked for at most twice a second)."""
        now = time.monotonic()
        if now - self._stats_at > 0.4:
            self._take_info(self._request("info"))
            self._stats_at = now
        return self._info.get("stats", {})

    def capture_dark(self, *args: Any, **kwargs: Any) -> None:
        self._request("capture_dark", *args, **kwargs)

    def capture_baseline(self, *args: Any, **kwargs: Any) -> None:
        self._request("capture_baseline", *args, **kwargs)

    def capture_background(self, *args: Any, **kwargs: Any) -> str:
        return self._request("capture_background", *args, **kwargs)

    def set_modulation(self, hz: float | None, who: str = "gainbench") -> None:
        self._request("set_modulation", hz, who=who)

    def set_mode(self, mode: str, settings: Mapping[str, Any] | None = None, who: str = "gainbench") -> None:
        self._request("set_mode", mode, dict(settings or {}), who=who)
        self.mode = mode

    def set_current(self, current: float, who: str = "gainbench") -> None:
        self._request("set_current", current, who=who)

    def emit(self, who: str) -> None:
        self._request("emit", who)

    def stop_emission(self, who: str = "gainbench") -> None:
        self._request("stop_emission", who=who)

    def acknowledge(self, who: str) -> None:
        self._request("acknowledge", who)

    def note(self, text: str, who: str | None = None) -> None:
        self._request("note", text, who)

    def checklist_items(self):
        from bench.safety.checklist import checklist_items

        return checklist_items(self.cfg)

    def pump_readings(self) -> dict[str, object]:
        return self._request("pump_readings")

    def arm(self, answers, operator: str):
        return self._request("arm", answers, operator)

    def hold(self, seconds: float, should_stop: Callable[[], bool] | None = None, **_: Any) -> None:
        """Wait ``seconds`` of run-clock time here (the bench process goes on acquiring)."""
        end = self.clock.now() + seconds
        while self.clock.now() < end:
            if self._gone is not None:
                raise BenchProcessError(self._gone)
            if should_stop is not None and should_stop():
                return
            time.sleep(min(0.02, max(0.0, (end - self.clock.now()) / self.speed)))
