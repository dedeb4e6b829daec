"""TCP transport of the simulated instruments: a thin loop around a sans-I/O session.

One `InstrumentServer` per instrument listens on 127.0.0.1 (loopback only) on a free port
(bound to port 0). Several clients may connect; each gets its own parser session (the
instrument's state and error queue are shared). Received bytes go to the session with the
bench lock held; its replies pass through the instrument's `ReplyFaults` (garbled or held
back) and are sent. A client that goes away ends only its own thread. Threads are daemon
threads; `InstrumentServer.close` stops accepting, closes every connection and joins them.
"""

from __future__ import annotations

import logging
import select
import socket
import threading
from collections.abc import Callable
from typing import Protocol

from simulated_instruments.clock import SimClock
from simulated_instruments.faults import SLOW_REPLY_DELAY

log = logging.getLogger(__name__)

HOST = "127.0.0.1"
POLL = 0.1  # s, how often blocked threads look at the stop flag


class Session(Protocol):
    def receive(self, data: bytes) -> list[bytes]: ...


_GARBAGE = b"?#~%&@!^"


def garble(reply: bytes) -> bytes:
    """The reply with every byte before its terminator replaced by junk (same length)."""
    term = b"\r\n" if reply.endswith(b"\r\n") else (b"\n" if reply.endswith(b"\n") else b"")
    body_len = len(reply) - len(term)
    junk = (_GARBAGE * (body_len // len(_GARBAGE) + 1))[:body_len]
    return junk + term


class ReplyFaults:
    """Windows of simulated time in which an instrument's replies are garbled or slow.

    A window without an end affects one reply only (the first after its start).
    """

    def __init__(self, clock: SimClock):
        self.clock = clock
        self._lock = threading.Lock()
        self._windows: list[list] = []  # [kind, start, end or None, used]

    def add(self, kind: str, start: float, end: float | None) -> None:
        if kind not in ("garble", "slow"):
            raise ValueError(f"kind: expected 'garble' or 'slow', got {kind!r}")
        with self._lock:
            self._windows.append([kind, start, end, False])

    def treat(self, reply: bytes) -> tuple[bytes, float]:
        """(reply as sent, real seconds to hold it back)."""
        now = self.clock.now()
        delay = 0.0
        with self._lock:
            for w in self._windows:
                kind, start, end, used = w
                if now < start or used:
                    continue
                if end is None:
                    w[3] = True
                elif now >= end:
                    continue
                if kind == "garble":
                    reply = garble(reply)
                else:
                    delay = SLOW_REPLY_DELAY
        return reply, delay


class InstrumentServer:
    """Serve one instrument on loopback TCP (see module docstring)."""

    def __init__(
        self, role: str, new_session: Callable[[], Session], lock: threading.RLock, faults: ReplyFaults
    ):
        self.role = role
        self._new_session = new_session
        self._lock = lock
        self._faults = faults
        self._stop = threading.Event()
        self._clients: set[socket.socket] = set()
        self._clients_lock = threading.Lock()
        self._threads: list[threading.Thread] = []
        self._listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._listener.bind((HOST, 0))
        self._listener.listen(8)
        self.port = self._listener.getsockname()[1]
        self._accept_thread = threading.Thread(
            target=self._accept_loop, name=f"sim-{role}-accept", daemon=True
        )
        self._accept_thread.start()

    # -- threads ---------------------------------------------------------------------------------
    def _accept_loop(self) -> None:
        while not self._stop.is_set():
            try:
                ready, _, _ = select.select([self._listener], [], [], POLL)
                if not ready:
                    continue
                conn, _ = self._listener.accept()
            except OSError:
                break  # the listener was closed
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            with self._clients_lock:
                if self._stop.is_set():
                    conn.close()
                    break
                self._clients.add(conn)
                thread = threading.Thread(
                    target=self._client_loop, args=(conn,), name=f"sim-{self.role}-client", daemon=True
                )
                self._threads = [t for t in self._threads if t.is_alive()] + [thread]
            thread.start()

    def _client_loop(self, conn: socket.socket) -> None:
        session = self._new_session()
        try:
            while not self._stop.is_set():
                ready, _, _ = select.select([conn], [], [], POLL)
                if not ready:
                    continue
                data = conn.recv(65536)
                if not data:
                    break
                with self._lock:
                    replies = session.receive(data)
                for reply in replies:
                    reply, delay = self._faults.treat(reply)
                    if delay and self._stop.wait(delay):
                        return
                    conn.sendall(reply)
        except OSError:
            pass  # the client went away or the connection was dropped
        except Exception:  # a bug in a command handler ends this connection, not the server
            log.exception("simulated %s: error while serving a client", self.role)
        finally:
            with self._clients_lock:
                self._clients.discard(conn)
            try:
                conn.close()
            except OSError:
                pass

    # -- control ---------------------------------------------------------------------------------
    @property
    def client_count(self) -> int:
        with self._clients_lock:
            return len(self._clients)

    def drop_clients(self) -> None:
        """Close every client connection now (the dropped-connection fault)."""
        with self._clients_lock:
            clients = list(self._clients)
        for conn in clients:
            try:
                conn.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
            try:
                conn.close()
            except OSError:
                pass

    def stop(self) -> None:
        """Stop accepting and close all connections (returns at once; `join` waits)."""
        self._stop.set()
        try:
            self._listener.close()
        except OSError:
            pass
        self.drop_clients()

    def join(self, timeout: float = 2.0) -> None:
        """Wait for the server's threads to end (each within ``timeout``)."""
        self._accept_thread.join(timeout)
        self.drop_clients()  # a client accepted while stopping
        with self._clients_lock:
            threads = list(self._threads)
        for t in threads:
            t.join(timeout)

    def close(self, timeout: float = 2.0) -> None:
        """`stop`, then `join`."""
        self.stop()
        self.join(timeout)
