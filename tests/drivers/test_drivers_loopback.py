"""Transports, the session loop and the role drivers against instruments on loopback.

The instruments here are a few lines of plain socket code in this file (they share nothing
with the drivers' parsing code), plus pyserial's ``loop://`` port. They check what the wire
does to a driver: timeouts end within their deadline, short reads are timeouts, a dropped
connection is reported and a reconnect works, a garbled reply is a `ReplyError`, a non-empty
error queue is an `InstrumentReportedError`, and a binary block holding 0x0A bytes arrives
whole. Reply forms follow IEEE Std 488.2-1992 (8.7.9 definite-length blocks) and SCPI 1999
volume 2 section 21.8 (``SYST:ERR?``; -222 "Data out of range" is a standard code).
"""

from __future__ import annotations

import socket
import struct
import threading
import time
from collections.abc import Callable

import numpy as np
import pytest

from drivers.deadline import Deadline
from drivers.errors import (
    ConnectionLost,
    InstrumentError,
    InstrumentReportedError,
    InstrumentTimeout,
    ReplyError,
)
from drivers.registry import open_instrument
from drivers.transports.serial import SerialTransport
from drivers.transports.visa import VisaTransport

# -- a throwaway instrument on 127.0.0.1 --------------------------------------------------

DROP = object()  # close the connection instead of answering
SILENT = object()  # swallow the command, answer nothing


class Trickle(bytes):
    """A reply sent one byte per send call."""


class FakeInstrument:
    """Answers each received line with ``respond(line, connection_number)``."""

    def __init__(self, respond: Callable[[bytes, int], object], terminator: bytes = b"\n") -> None:
        self.respond = respond
        self.terminator = terminator
        self.listener = socket.create_server(("127.0.0.1", 0))
        self.port = self.listener.getsockname()[1]
        self.received: list[tuple[int, bytes]] = []
        self.connections = 0
        self._open: list[socket.socket] = []
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while True:
            try:
                conn, _ = self.listener.accept()
            except OSError:
                return
            self.connections += 1
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            self._open.append(conn)
            threading.Thread(target=self._serve, args=(conn, self.connections), daemon=True).start()

    def _serve(self, conn: socket.socket, number: int) -> None:
        buf = b""
        with conn:
            while True:
                try:
                    data = conn.recv(65536)
                except OSError:
                    return
                if not data:
                    return
                buf += data
                while self.terminator in buf:
                    line, buf = buf.split(self.terminator, 1)
                    self.received.append((number, line))
                    action = self.respond(line, number)
                    try:
                        if action is DROP:
                            conn.shutdown(socket.SHUT_RDWR)
                            return
                        if isinstance(action, Trickle):
                            for i in range(len(action)):
                                conn.sendall(action[i : i + 1])
                        elif action is not None:
                            conn.sendall(action)  # type: ignore[arg-type]
                    except OSError:
                        return

    def close(self) -> None:
        self.listener.close()
        for conn in self._open:
            try:
                conn.close()
            except OSError:
                pass


def visa_resource(port: int) -> str:
    return f"TCPIP::127.0.0.1::{port}::SOCKET"


def serial_resource(port: int) -> str:
    return f"socket://127.0.0.1:{port}"


RESOURCES = {"visa": visa_resource, "serial": serial_resource}


def make_transport(kind: str, port: int, timeout_s: float = 1.0, term: bytes = b"\n"):
    if kind == "visa":
        return VisaTransport(visa_resource(port), timeout_s=timeout_s, read_termination=term, role="test")
    return SerialTransport(serial_resource(port), timeout_s=timeout_s, read_termination=term, role="test")


@pytest.fixture
def instrument():
    made: list[FakeInstrument] = []

    def start(respond, terminator=b"\n") -> FakeInstrument:
        inst = FakeInstrument(respond, terminator)
        made.append(inst)
        return inst

    yield start
    for inst in made:
        inst.close()


def wait_until(condition: Callable[[], bool], timeout_s: float = 5.0) -> None:
    deadline = Deadline(timeout_s)
    while not condition():
        if deadline.expired():
            raise AssertionError("condition not met before the deadline")
        time.sleep(0.001)


# -- transports ---------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_timeout_raises_within_its_deadline(instrument, kind):
    inst = instrument(lambda line, n: None)  # never answers
    t = make_transport(kind, inst.port)
    try:
        t.write(b"MEAS:CURR?\n")
        start = time.monotonic()
        with pytest.raises(InstrumentTimeout):
            t.read_line(Deadline(0.3))
        elapsed = time.monotonic() - start
        # waited for the deadline, and not much longer (generous bound for a loaded CI machine)
        assert 0.25 <= elapsed < 0.3 + 1.5
    finally:
        t.close()


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_short_read_is_a_timeout_not_data(instrument, kind):
    inst = instrument(lambda line, n: b"12345")
    t = make_transport(kind, inst.port)
    try:
        t.write(b"X\n")
        with pytest.raises(InstrumentTimeout, match=r"only \d of 10 bytes") as info:
            t.read_exact(10, Deadline(0.3))
        if kind == "serial":  # pyserial hands over what arrived; a VISA library drops it
            assert info.value.reply == b"12345"
    finally:
        t.close()


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_trickled_reply_is_one_line(instrument, kind):
    inst = instrument(lambda line, n: Trickle(b"0.123456789\n"))
    t = make_transport(kind, inst.port)
    try:
        t.write(b"MEAS:CURR?\n")
        assert t.read_line(Deadline(2.0)) == b"0.123456789"
    finally:
        t.close()


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_dropped_connection_then_reconnect(instrument, kind):
    inst = instrument(lambda line, n: DROP if n == 1 else b"PONG\n")
    t = make_transport(kind, inst.port)
    try:
        t.write(b"PING\n")
        with pytest.raises(ConnectionLost):
            t.read_line(Deadline(0.5))
        t.reconnect()
        t.write(b"PING\n")
        assert t.read_line(Deadline(2.0)) == b"PONG"
        assert inst.connections == 2
    finally:
        t.close()


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_write_after_the_instrument_closed_is_connection_lost(instrument, kind):
    inst = instrument(lambda line, n: DROP)
    t = make_transport(kind, inst.port)
    try:
        t.write(b"BYE\n")
        wait_until(lambda: len(inst.received) == 1)
        with pytest.raises(ConnectionLost):
            t.write(b"AGAIN\n")
            t.write(b"AGAIN\n")  # a first send into a closed socket may still succeed
            t.read_line(Deadline(0.5))
    finally:
        t.close()


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_connection_refused(kind):
    with socket.create_server(("127.0.0.1", 0)) as s:
        port = s.getsockname()[1]
    with pytest.raises(ConnectionLost) as info:
        t = make_transport(kind, port)
        t.write(b"*IDN?\n")
    assert str(port) in str(info.value)


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_binary_read_exact_with_line_feeds(instrument, kind):
    payload = b"\n" * 1000 + bytes(range(256)) * 40
    inst = instrument(lambda line, n: payload)
    t = make_transport(kind, inst.port)
    try:
        t.write(b"DATA?\n")
        assert t.read_exact(len(payload), Deadline(2.0)) == payload
    finally:
        t.close()


def test_loop_port_lines_and_exact_reads():
    t = SerialTransport("loop://", timeout_s=0.5, read_termination=b"\r\n")
    try:
        t.write(b"OK\r\nSHUT")
        t.write(b"\r\nabc")
        assert t.read_line(Deadline(1.0)) == b"OK"
        assert t.read_line(Deadline(1.0)) == b"SHUT"
        assert t.read_exact(3, Deadline(1.0)) == b"abc"
        t.write(b"\r")  # a lone CR is not the end of a line
        with pytest.raises(InstrumentTimeout, match="no complete reply line"):
            t.read_line(Deadline(0.2))
        t.write(b"ab")  # the unfinished line's CR is still waiting: 3 bytes of 4
        with pytest.raises(InstrumentTimeout, match="only 3 of 4 bytes") as info:
            t.read_exact(4, Deadline(0.2))
        assert info.value.reply == b"\rab"
    finally:
        t.close()


def test_loop_port_closed_is_connection_lost():
    t = SerialTransport("loop://", timeout_s=0.5)
    t.close()
    with pytest.raises(ConnectionLost, match="closed"):
        t.write(b"x")


def test_transport_arguments_are_checked():
    with pytest.raises(ValueError, match="read_termination"):
        SerialTransport("loop://", read_termination=b"")
    with pytest.raises(ValueError, match="baudrate"):
        SerialTransport("loop://", baudrate=0)


# -- a SCPI pump on loopback ----------------------------------------------------------------


class ScpiPump:
    """Enough of a SCPI diode driver to exercise the session loop."""

    def __init__(self) -> None:
        self.current = 0.0
        self.on = False
        self.errors: list[bytes] = []
        self.misbehave: dict[bytes, Callable[[int], object]] = {}
        self.silent: set[bytes] = set()
        self.lock = threading.Lock()

    def __call__(self, line: bytes, conn: int) -> object:
        with self.lock:
            if line in self.silent:
                return None
            if line in self.misbehave:
                action = self.misbehave.pop(line)(conn)
                if action is SILENT:
                    return None
                if action is not None:
                    return action
            if line == b"*IDN?":
                return b"Loopback Devices,LD-1,0001,0.1\n"
            if line == b"SYST:ERR?":
                return (self.errors.pop(0) if self.errors else b'0,"No error"') + b"\n"
            if line.startswith(b"SOUR:CURR "):
                value = float(line.split()[1])
                if value > 10:
                    self.errors.append(b'-222,"Data out of range"')
                else:
                    self.current = value
                return None
            if line in (b"SOUR:CURR?", b"MEAS:CURR?"):
                return f"{self.current if (self.on or line == b'SOUR:CURR?') else 0.0:.4f}\n".encode()
            if line in (b"OUTP ON", b"OUTP OFF"):
                self.on = line.endswith(b"ON")
                return None
            if line == b"OUTP?":
                return b"1\n" if self.on else b"0\n"
            if line == b"OUTP:INTL?":
                return b"1\n"
            if line == b"MEAS:TEMP?":
                return b"24.50\n"
            self.errors.append(b'-113,"Undefined header"')
            return None


def open_pump(kind: str, port: int, timeout_s: float = 0.5):
    return open_instrument("pump", "pump-driver", RESOURCES[kind](port), "generic-pump", timeout_s)


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_pump_driver_basic_exchange(instrument, kind):
    pump = ScpiPump()
    inst = instrument(pump)
    with open_pump(kind, inst.port) as drv:
        assert drv.identify().model == "LD-1"
        drv.set_current(2.5)
        drv.output(True)
        assert drv.output_is_on()
        assert drv.measured_current() == 2.5
        assert drv.interlock_closed()
        assert drv.mount_temperature() == pytest.approx(24.5 + 273.15)  # 0 degC = 273.15 K (SI definition)
        drv.output(False)
        assert not drv.output_is_on()
        # every setting command was followed by one error-queue query
        sent = [line for _, line in inst.received]
        i = sent.index(b"SOUR:CURR 2.5")
        assert sent[i + 1] == b"SYST:ERR?"
        assert drv.stats.reads >= 8 and drv.stats.errors == 0


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_error_queue_non_empty_raises_reported_error(instrument, kind):
    pump = ScpiPump()
    pump.errors.append(b'201,"Interlock open"')  # left from before: drained with the new one
    inst = instrument(pump)
    with open_pump(kind, inst.port) as drv:
        with pytest.raises(InstrumentReportedError) as info:
            drv.set_current(50.0)
        err = info.value
        assert err.code == 201 and err.text == "Interlock open"
        assert err.others == ((-222, "Data out of range"),)
        assert "SOUR:CURR 50" in str(err) and "pump instrument" in str(err)
        assert drv.current_setpoint() == 0.0  # the refused setpoint was not taken
        assert drv.instrument_errors() == []
        assert drv.stats.errors == 1


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_garbled_reply_is_reply_error_and_the_next_exchange_works(instrument, kind):
    pump = ScpiPump()
    pump.misbehave[b"SOUR:CURR?"] = lambda conn: b"2.5\x00\xff#garble\n"
    inst = instrument(pump)
    with open_pump(kind, inst.port) as drv:
        with pytest.raises(ReplyError) as info:
            drv.current_setpoint()
        assert "garble" in str(info.value) and "SOUR:CURR?" in str(info.value)
        assert drv.current_setpoint() == 0.0
        assert drv.stats.reconnects == 0


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_timeout_reconnects_and_resends_an_idempotent_query(instrument, kind):
    pump = ScpiPump()
    pump.misbehave[b"MEAS:TEMP?"] = lambda conn: DROP if conn == 1 else None
    inst = instrument(pump)
    with open_pump(kind, inst.port) as drv:
        assert drv.mount_temperature() == pytest.approx(297.65)
        stats = drv.stats
        assert stats.reconnects == 1 and stats.retries == 1 and stats.errors == 0
        assert inst.connections == 2


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_silent_first_attempt_is_resent(instrument, kind):
    pump = ScpiPump()
    pump.misbehave[b"OUTP?"] = lambda conn: SILENT if conn == 1 else None
    inst = instrument(pump)
    with open_pump(kind, inst.port, timeout_s=0.3) as drv:
        assert drv.output_is_on() is False
        assert drv.stats.retries == 1 and drv.stats.reconnects == 1
        assert [line for _, line in inst.received].count(b"OUTP?") == 2


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_silent_instrument_raises_after_the_second_attempt(instrument, kind):
    pump = ScpiPump()
    pump.silent.add(b"OUTP?")
    inst = instrument(pump)
    with open_pump(kind, inst.port, timeout_s=0.3) as drv:
        start = time.monotonic()
        with pytest.raises(InstrumentTimeout) as info:
            drv.output_is_on()
        # two deadlines of 0.3 s and a reconnect (generous bound for a loaded CI machine)
        assert time.monotonic() - start < 2 * 0.3 + 2.0
        message = str(info.value)
        assert "second attempt" in message and "OUTP?" in message and "pump instrument" in message
        assert drv.stats.errors == 1
        drv.output(False)  # the session is usable again
        assert drv.stats.errors == 1


def test_non_idempotent_command_is_not_resent(instrument):
    sent: list[bytes] = []

    def respond(line, conn):
        sent.append(line)
        if line == b"INIT":
            return DROP
        if line == b"SYST:ERR?":
            return b'0,"No error"\n'
        return None

    inst = instrument(respond)
    drv = open_instrument("detector", "digitiser", visa_resource(inst.port), "generic-digitiser", 0.3)
    try:
        with pytest.raises(ConnectionLost, match="was not sent again"):
            drv.start()
        assert sent.count(b"INIT") == 1
        assert drv.stats.reconnects == 1
    finally:
        drv.close()


def test_two_threads_share_one_session(instrument):
    pump = ScpiPump()
    inst = instrument(pump)
    drv = open_pump("visa", inst.port, timeout_s=2.0)
    failures: list[BaseException] = []

    def worker(value: float) -> None:
        try:
            for _ in range(25):
                drv.set_current(value)
                drv.current_setpoint()
                assert drv.identify().model == "LD-1"
        except BaseException as exc:  # collected and re-raised in the main thread
            failures.append(exc)

    threads = [threading.Thread(target=worker, args=(v,)) for v in (1.0, 2.0)]
    for th in threads:
        th.start()
    for th in threads:
        th.join(30)
    drv.close()
    assert not failures, failures
    assert drv.stats.errors == 0


# -- the digitiser -------------------------------------------------------------------------


class FakeDigitiser:
    """Sample sets of 2 or 3 channels served as REAL,32 blocks or ASCII."""

    def __init__(self, n_sets: int = 5000) -> None:
        lf = struct.unpack("<f", b"\n\n\n\n")[0]  # a float32 made of four 0x0A bytes
        rng = np.random.default_rng(7)
        self.data = rng.normal(0.5, 0.1, size=(n_sets, 3)).astype("<f4")
        self.data[::7, 0] = lf
        self.pos = 0
        self.scan = [1, 2, 3]
        self.binary = True
        self.lost = 0

    def __call__(self, line: bytes, conn: int) -> object:
        text = line.decode()
        if text == "*IDN?":
            return b"Loopback Devices,DG-3,0002,0.1\n"
        if text == "SYST:ERR?":
            return b'0,"No error"\n'
        if text.startswith("ROUT:SCAN (@"):
            self.scan = [int(c) for c in text[len("ROUT:SCAN (@") : -1].split(",")]
            return None
        if text.startswith("FORM:DATA"):
            self.binary = "REAL" in text
            return None
        if text == "CONF:RATE?":
            return b"100000\n"
        if text == "FETC:POS?":
            return f"{self.pos}\n".encode()
        if text == "FETC:LOST?":
            return f"{self.lost}\n".encode()
        if text.startswith("FETC:DATA? "):
            n = int(text.split()[1])
            rows = self.data[self.pos : self.pos + n][:, [c - 1 for c in self.scan]]
            self.pos += len(rows)
            if self.binary:
                body = np.ascontiguousarray(rows).tobytes()
                digits = str(len(body))
                return b"#" + str(len(digits)).encode() + digits.encode() + body + b"\n"
            return (",".join(repr(float(v)) for v in rows.ravel()) + "\n").encode()
        return None


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_digitiser_fetch_binary_blocks_with_line_feeds(instrument, kind):
    dig = FakeDigitiser()
    inst = instrument(dig)
    with open_instrument(
        "detector",
        "digitiser",
        RESOURCES[kind](inst.port),
        "generic-digitiser",
        2.0,
        {"channels": [1, 2], "sample_rate": "100 kHz"},
    ) as drv:
        drv.configure()
        assert drv.rate_hz == 100000.0
        assert drv.channel_names == ("probe", "reference")
        first = drv.fetch(1000)
        second = drv.fetch(10000)
        assert first.first_index == 0 and second.first_index == 1000
        assert first.data.shape == (1000, 2) and second.data.shape == (4000, 2)
        assert first.data.dtype == np.float64
        np.testing.assert_array_equal(first.data, dig.data[:1000, :2].astype(np.float64))
        np.testing.assert_array_equal(second.data, dig.data[1000:, :2].astype(np.float64))
        empty = drv.fetch(100)
        assert empty.data.shape == (0, 2) and empty.first_index == 5000 and empty.lost == 0


def test_digitiser_fetch_ascii(instrument):
    dig = FakeDigitiser(n_sets=50)
    inst = instrument(dig)
    with open_instrument(
        "detector", "digitiser", visa_resource(inst.port), "generic-digitiser", 2.0, {"format": "ascii"}
    ) as drv:
        drv.configure(channels=(3, 1))
        got = drv.fetch(20)
        np.testing.assert_allclose(got.data, dig.data[:20][:, [2, 0]].astype(np.float64), rtol=0)
        assert drv.channel_names == ("pump_monitor", "probe")


def test_digitiser_incomplete_sample_set_is_reply_error(instrument):
    dig = FakeDigitiser(n_sets=10)
    inst = instrument(dig)
    with open_instrument("detector", "digitiser", visa_resource(inst.port), "generic-digitiser", 2.0) as drv:
        drv.configure(channels=(1, 2))
        drv.channels = (1, 2, 3)  # the driver now expects three columns, the device sends two
        with pytest.raises(ReplyError, match="not whole sample sets of 3 channels"):
            drv.fetch(5)


@pytest.mark.parametrize("kind", ["visa", "serial"])
def test_digitiser_ascii_reply_where_a_block_was_expected(instrument, kind):
    dig = FakeDigitiser(n_sets=100)
    dig.binary = False  # the device sends ASCII, the driver expects REAL,32 blocks
    inst = instrument(dig)
    with open_instrument(
        "detector", "digitiser", RESOURCES[kind](inst.port), "generic-digitiser", 1.0
    ) as drv:
        with pytest.raises(ReplyError, match="expected '#'"):
            drv.fetch(10)
        # the rest of the ASCII line was discarded: the next reply is read correctly
        assert drv.position() == 10
        assert drv.stats.errors == 1


# -- the shutter line protocol ------------------------------------------------------------


class FakeShutters:
    def __init__(self) -> None:
        self.open = {1: True, 2: True}
        self.chop: dict[int, float] = {}

    def __call__(self, line: bytes, conn: int) -> object:
        words = line.decode().split()
        if words == ["ID"]:
            return b"LS-1 shutter box,Loopback Devices,fw 0.1\r\n"
        if len(words) >= 2 and words[0] in ("OPEN", "SHUT", "STATE", "CHOP"):
            n = int(words[1])
            if n not in self.open:
                return b"ERR 2 bad shutter\r\n"
            if words[0] == "STATE":
                return b"OPEN\r\n" if self.open[n] else b"SHUT\r\n"
            if words[0] == "CHOP":
                self.chop[n] = float(words[2])
            else:
                self.open[n] = words[0] == "OPEN"
            return b"OK\r\n"
        return b"ERR 1 unknown command\r\n"


def test_shutter_line_protocol(instrument):
    box = FakeShutters()
    inst = instrument(box, terminator=b"\r")
    with open_instrument("shutter", "shutter", serial_resource(inst.port), "qs2-shutter", 1.0) as drv:
        ident = drv.identify()
        assert ident.maker == "Loopback Devices" and ident.model == "LS-1 shutter box"
        drv.close_shutter("probe")
        assert not drv.is_open("probe") and drv.is_open("pump")
        assert box.open == {1: False, 2: True}
        drv.open_shutter("probe")
        assert drv.is_open("probe")
        drv.chop("pump", 12.5)
        assert box.chop == {2: 12.5}
        with pytest.raises(ValueError, match="unknown shutter 'laser'"):
            drv.open_shutter("laser")


def test_closing_the_shutter_driver_only_releases_the_connection(instrument):
    # Closing a shutter and releasing the controller are two calls: neither does the other's job.
    box = FakeShutters()
    inst = instrument(box, terminator=b"\r")
    resource = serial_resource(inst.port)
    drv = open_instrument("shutter", "shutter", resource, "qs2-shutter", 1.0)
    drv.close_shutter("probe")
    with pytest.raises(TypeError):
        drv.close_shutter()  # a shutter must be named
    with pytest.raises(ValueError, match="name: unknown shutter None"):
        drv.close_shutter(None)
    assert drv.is_open("pump")  # still connected after the refused calls
    with pytest.raises(TypeError):
        drv.close("pump")  # closing the driver takes no shutter name
    drv.close()
    with pytest.raises(InstrumentError):
        drv.is_open("pump")  # released
    assert [line for _, line in inst.received] == [b"SHUT 1", b"STATE 2"]
    with open_instrument("shutter", "shutter", resource, "qs2-shutter", 1.0) as again:
        assert not again.is_open("probe") and again.is_open("pump")  # close() moved no shutter
    assert box.open == {1: False, 2: True}


def test_shutter_error_reply_is_reported(instrument):
    box = FakeShutters()
    inst = instrument(box, terminator=b"\r")
    drv = open_instrument(
        "shutter",
        "shutter",
        serial_resource(inst.port),
        "qs2-shutter",
        1.0,
        {"shutters": {"probe": 1, "pump": 7}},
    )
    try:
        with pytest.raises(InstrumentReportedError) as info:
            drv.close_shutter("pump")
        assert info.value.code == 2 and info.value.text == "bad shutter"
        assert "SHUT 7" in str(info.value)
    finally:
        drv.close()


# -- the wavelength source ----------------------------------------------------------------


def test_wavelength_source(instrument):
    state = {"wl": 1.03e-6, "polls": 0}

    def respond(line, conn):
        text = line.decode()
        if text == "SYST:ERR?":
            return b'0,"No error"\n'
        if text.startswith("SOUR:WAV "):
            state["wl"], state["polls"] = float(text.split()[1]), 0
            return None
        if text == "SOUR:WAV?":
            return f"{state['wl']:.9g}\n".encode()
        if text == "SOUR:WAV:RANG?":
            return b"1.0E-6,1.1E-6\n"
        if text == "STAT:SETT?":
            state["polls"] += 1
            return b"1\n" if state["polls"] >= 3 else b"0\n"
        return None

    inst = instrument(respond)
    with open_instrument(
        "wavelength", "wavelength-source", visa_resource(inst.port), "generic-wavelength", 1.0
    ) as drv:
        assert drv.tuning_range() == (1.0e-6, 1.1e-6)
        drv.set_wavelength(1.05e-6)
        assert not drv.settled()
        drv.wait_settled(2.0)
        assert drv.wavelength() == pytest.approx(1.05e-6, rel=1e-9)
        with pytest.raises(ValueError, match="wavelength_m"):
            drv.set_wavelength(-1.0)
