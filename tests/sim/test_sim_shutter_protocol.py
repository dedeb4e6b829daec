"""Device side of the QS-2 shutter controller's line protocol, fed bytes (no sockets).

The protocol is the simulator's own (simulated_instruments/COMMANDS.md); the framing checked
here (CR-terminated commands, CR LF replies, replies arriving in pieces) is common practice for
serial instruments, no source.
"""

from __future__ import annotations

from simulated_instruments.shutter_protocol import IDENTITY, ShutterSession


class FakeShutters:
    def __init__(self):
        self.open = {1: True, 2: True}
        self.chopping = {1: 0.0, 2: 0.0}

    def set_open(self, shutter, is_open):
        self.open[shutter] = is_open
        self.chopping[shutter] = 0.0

    def is_open(self, shutter):
        return self.open[shutter]

    def chop(self, shutter, hz):
        self.chopping[shutter] = hz
        self.open[shutter] = True


MESSAGE = b"ID\rSHUT 1\rSTATE 1\rstate 2\rCHOP 2 50\r"
REPLIES = [(IDENTITY + "\r\n").encode(), b"OK\r\n", b"SHUT\r\n", b"OPEN\r\n", b"OK\r\n"]


def test_whole_and_byte_by_byte():
    s = ShutterSession(FakeShutters())
    assert s.receive(MESSAGE) == REPLIES
    hw = FakeShutters()
    s = ShutterSession(hw)
    out = []
    for i in range(len(MESSAGE)):
        out += s.receive(MESSAGE[i : i + 1])
    assert out == REPLIES
    assert hw.chopping[2] == 50.0 and hw.open[1] is False


def test_crlf_and_lf_terminators():
    s = ShutterSession(FakeShutters())
    assert s.receive(b"ID\r\nID\n") == [REPLIES[0], REPLIES[0]]


def test_errors():
    s = ShutterSession(FakeShutters())
    assert s.receive(b"FLY 1\r") == [b"ERR 1 unknown command\r\n"]
    assert s.receive(b"OPEN 3\r") == [b"ERR 2 bad shutter\r\n"]
    assert s.receive(b"OPEN x\r") == [b"ERR 2 bad shutter\r\n"]
    assert s.receive(b"CHOP 1 500\r") == [b"ERR 3 bad value\r\n"]
    assert s.receive(b"CHOP 1 fast\r") == [b"ERR 3 bad value\r\n"]
    assert s.receive(b"OPEN\r") == [b"ERR 1 unknown command\r\n"]


def test_garbage_then_valid():
    s = ShutterSession(FakeShutters())
    assert s.receive(b"\xff\x00\x01\rID\r") == [b"ERR 1 unknown command\r\n", REPLIES[0]]
    assert s.receive(b"Z" * 1000) == [b"ERR 1 unknown command\r\n"]
    assert s.receive(b"ZZZ\rID\r") == [REPLIES[0]]


def test_chop_zero_stops_and_leaves_open():
    hw = FakeShutters()
    s = ShutterSession(hw)
    s.receive(b"SHUT 2\rCHOP 2 0\r")
    assert hw.open[2] is True and hw.chopping[2] == 0.0
