"""The I/O loop around a profile and a transport: every exchange with an instrument goes here.

One exchange is: encode the operation, write it, read the reply (a line, or a definite-length
block read exactly), decode it, and after a setting command drain the error queue. The retry
policy lives here and only here: after a timeout or a lost connection the session reconnects
once and resends the command if the profile says it is safe to repeat; otherwise the error is
raised (after reconnecting, so the next exchange starts clean). A garbled reply is never
retried; the unread input is discarded so the next reply is not misread.

A lock makes each exchange atomic, so the guard may switch the pump off from its own thread
while another thread is reading the pump. `stats` gives a snapshot for the dashboard.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from typing import Any

from drivers import codec
from drivers.deadline import Deadline
from drivers.errors import (
    ConnectionLost,
    InstrumentError,
    InstrumentReportedError,
    InstrumentTimeout,
    ReplyError,
    TruncatedBlock,
    translate_transport_error,
)
from drivers.ieee488 import NEED_DATA, BlockParser, ErrorEntry, parse_error_reply
from drivers.profile import Command, Profile
from drivers.transports.base import Transport


@dataclass(frozen=True)
class InstrumentStats:
    """Health of one instrument's connection, for the dashboard."""

    #: Exchanges that completed (a command written and, if any, its reply decoded).
    reads: int = 0
    #: Exchanges that ended in an error.
    errors: int = 0
    #: Times the connection was closed and opened again.
    reconnects: int = 0
    #: Commands sent a second time after a timeout or lost connection.
    retries: int = 0
    last_latency_s: float = 0.0
    mean_latency_s: float = 0.0
    #: Message of the most recent error ("" if none).
    last_error: str = ""


class Session:
    """Exchanges with one instrument through its ``profile`` over ``transport``.

    Parameters
    ----------
    profile : Profile
        The instrument's command profile.
    transport : Transport
        An open transport.
    role, resource : str
        Name the instrument in errors.
    timeout_s : float
        Deadline of one exchange (write, reply, error drain).
    """

    def __init__(
        self,
        profile: Profile,
        transport: Transport,
        *,
        role: str,
        resource: str,
        timeout_s: float,
    ) -> None:
        if not timeout_s > 0:
            raise ValueError(f"timeout_s: expected > 0, got {timeout_s!r}")
        self.profile = profile
        self.transport = transport
        self.role = role
        self.resource = resource
        self.timeout_s = float(timeout_s)
        self._lock = threading.RLock()
        self._counts = {"reads": 0, "errors": 0, "reconnects": 0, "retries": 0}
        self._latency_sum = 0.0
        self._last_latency = 0.0
        self._last_error = ""
        self._closed = False

    # -- public ------------------------------------------------------------------------

    @property
    def stats(self) -> InstrumentStats:
        """A snapshot of the counters."""
        with self._lock:
            n = self._counts["reads"]
            return InstrumentStats(
                reads=n,
                errors=self._counts["errors"],
                reconnects=self._counts["reconnects"],
                retries=self._counts["retries"],
                last_latency_s=self._last_latency,
                mean_latency_s=self._latency_sum / n if n else 0.0,
                last_error=self._last_error,
            )

    def has(self, op: str) -> bool:
        return self.profile.has(op)

    def query(self, op: str, **params: Any) -> Any:
        """Send operation ``op`` and return its decoded reply (SI units)."""
        command = self.profile.command(op)
        if command.reply is None:
            raise ValueError(f"op: {op!r} has no reply in profile {self.profile.name}; use write()")
        return self._run(command, params)

    def write(self, op: str, **params: Any) -> None:
        """Send setting operation ``op`` (an acknowledgement reply, if any, is checked)."""
        command = self.profile.command(op)
        self._run(command, params)

    def query_many(self, ops: list[str] | tuple[str, ...]) -> list[Any]:
        """Several queries in one message, their replies in one line.

        The query texts are joined with ``;`` into one compound program message, as IEEE
        488.2 (section 7.1) allows, and the reply line is split on ``;``, each part decoded
        by its own operation's reply format. One exchange instead of one per query.
        """
        commands = [self.profile.command(op) for op in ops]
        for c in commands:
            if c.reply is None or c.is_block or c.placeholders:
                raise ValueError(f"ops: {c.op!r} is not a plain one-line query, so it cannot be joined")
        sends = [codec.encode(c, {}, b"") for c in commands]
        data = b";".join(sends) + self.profile.transport.write_termination
        joined = Command(op="+".join(ops), send="", reply="text")
        line = self._run(joined, {}, data=data)
        parts = line.split(";")
        if len(parts) != len(commands):
            raise ReplyError(
                f"expected {len(commands)} replies separated by ';', got {len(parts)}",
                reply=line.encode("ascii", "replace"),
                role=self.role,
                resource=self.resource,
                command=data,
            )
        return [
            codec.decode_line(c, part.encode("ascii"), self.profile.errors)
            for c, part in zip(commands, parts)
        ]

    def drain_errors(self) -> list[ErrorEntry]:
        """Drain the error queue and return its entries (empty if the profile has no query)."""
        if not self.profile.errors.query:
            return []
        with self._lock:
            deadline = Deadline(self.timeout_s)
            try:
                return self._drain(deadline, self.profile.errors.query)
            except InstrumentError as exc:
                self._count_error(exc)
                raise

    def close(self) -> None:
        with self._lock:
            self._closed = True
            self.transport.close()

    # -- the loop ----------------------------------------------------------------------

    def _context(self, exc: BaseException, command: bytes | None) -> InstrumentError:
        return translate_transport_error(exc, role=self.role, resource=self.resource, command=command)

    def _count_error(self, exc: InstrumentError) -> None:
        self._counts["errors"] += 1
        self._last_error = str(exc)

    def _run(self, command: Command, params: dict[str, Any], data: bytes | None = None) -> Any:
        if data is None:
            data = codec.encode(command, params, self.profile.transport.write_termination)
        with self._lock:
            if self._closed:
                raise ConnectionLost(
                    "the session is closed", role=self.role, resource=self.resource, command=data
                )
            t0 = time.perf_counter()
            try:
                result = self._exchange_with_retry(command, data)
            except InstrumentError as exc:
                self._count_error(exc)
                raise
            latency = time.perf_counter() - t0
            self._counts["reads"] += 1
            self._last_latency = latency
            self._latency_sum += latency
            return result

    def _exchange_with_retry(self, command: Command, data: bytes) -> Any:
        try:
            return self._exchange(command, data)
        except (InstrumentTimeout, ConnectionLost) as first:
            self._reconnect(first, data)
            if not command.idempotent:
                first.detail += (
                    f"; reconnected, but {command.op!r} was not sent again because repeating it "
                    "is not safe (set idempotent = true in the profile if it is)"
                )
                raise
            self._counts["retries"] += 1
            try:
                return self._exchange(command, data)
            except (InstrumentTimeout, ConnectionLost) as second:
                second.detail += f" (second attempt, after reconnecting; first: {first.detail})"
                raise
        except ReplyError:
            self.transport.discard_input()
            raise

    def _reconnect(self, cause: InstrumentError, data: bytes) -> None:
        try:
            self.transport.reconnect()
        except Exception as exc:  # every failure to reopen is reported the same way
            err = self._context(exc, data)
            err.detail = f"reconnecting after '{cause.detail}' failed: {err.detail}"
            raise err from exc
        self._counts["reconnects"] += 1

    def _exchange(self, command: Command, data: bytes) -> Any:
        deadline = Deadline(self.timeout_s)
        try:
            self.transport.write(data)
            if command.reply is None:
                result = None
            elif command.is_block:
                result = codec.decode_block(command, self._read_block(deadline))
            else:
                line = self.transport.read_line(deadline)
                try:
                    result = codec.decode_line(command, line, self.profile.errors)
                except InstrumentError as exc:
                    exc.reply = line if exc.reply is None else exc.reply
                    raise
        except Exception as exc:
            raise self._context(exc, data) from exc
        if command.check_errors and self.profile.errors.query:
            try:
                entries = self._drain(deadline, self.profile.errors.query)
            except InstrumentError as exc:
                raise exc.with_context(command=data) from exc
            if entries:
                first, *others = entries
                raise InstrumentReportedError(
                    first.code,
                    first.text,
                    others=tuple((e.code, e.text) for e in others),
                    role=self.role,
                    resource=self.resource,
                    command=data,
                )
        return result

    def _read_block(self, deadline: Deadline) -> bytes:
        parser = BlockParser(terminator=self.profile.transport.read_termination)
        while True:
            payload = parser.next()
            if payload is not NEED_DATA:
                return payload  # type: ignore[return-value]
            try:
                data = self.transport.read_exact(parser.bytes_needed(), deadline)
            except InstrumentTimeout as exc:
                declared = parser.declared_length
                if declared is None:  # not even the header arrived: a plain timeout
                    raise
                raise TruncatedBlock(
                    f"definite-length block cut short: its header declares {declared} data bytes "
                    f"and then {parser.terminator!r} (IEEE 488.2 8.7.9), but {exc.detail}",
                    reply=exc.reply,
                ) from exc
            parser.feed(data)

    def _drain(self, deadline: Deadline, query: str) -> list[ErrorEntry]:
        """Pop error-queue entries until it reports code 0."""
        request = query.encode("ascii") + self.profile.transport.write_termination
        entries: list[ErrorEntry] = []
        for _ in range(self.profile.errors.max_entries):
            try:
                self.transport.write(request)
                line = self.transport.read_line(deadline)
                entry = parse_error_reply(line)
            except Exception as exc:
                raise self._context(exc, request) from exc
            if not entry.is_error:
                return entries
            entries.append(entry)
        return entries
