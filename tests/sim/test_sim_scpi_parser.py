"""Device-side SCPI parser of the simulated instruments, fed bytes (no sockets).

Rules checked against IEEE Std 488.2-1992 ch. 7 (program messages: LF terminator, `;` between
commands, common commands `*XXX`), SCPI-99 vol. 1 ch. 6 (short/long keyword forms, optional
keywords, compound headers) and SCPI-99 vol. 2 ch. 21 (error codes -100, -113, -108, -109,
-222, -224, -350; "0,\"No error\"" when the queue is empty; overflow replaces the newest entry).
"""

from __future__ import annotations

import pytest

from simulated_instruments.device_errors import DeviceError, ErrorQueue
from simulated_instruments.scpi import (
    Command,
    CommandTable,
    ScpiSession,
    boolean,
    channel_list,
    common_commands,
    definite_block,
    expect,
    fmt,
    number,
)


class Toy:
    """A tiny instrument: a current setpoint with a limit, an output, a block query."""

    def __init__(self):
        self.errors = ErrorQueue()
        self.current = 0.0
        self.limit = 5.0
        self.output = False
        self.resets = 0

        def set_current(p):
            value = number(expect(p, 1)[0])
            if not 0 <= value <= self.limit:
                raise DeviceError(-222)
            self.current = value

        def set_limit(p):
            self.limit = number(expect(p, 1)[0])

        def set_output(p):
            self.output = boolean(expect(p, 1)[0])

        def reset():
            self.resets += 1

        self.table = CommandTable(
            common_commands("Maker,Toy,1,0", reset, self.errors)
            + [
                Command("[SOURce]:CURRent:LIMit", set=set_limit, query=lambda p: fmt(self.limit)),
                Command("[SOURce]:CURRent[:LEVel]", set=set_current, query=lambda p: fmt(self.current)),
                Command("OUTPut[:STATe]", set=set_output, query=lambda p: "1" if self.output else "0"),
                Command("FETCh:DATA", query=lambda p: definite_block(b"\x00\n\x01" * int(number(p[0])))),
                Command(
                    "ROUTe:SCAN",
                    set=lambda p: None,
                    query=lambda p: ",".join(map(str, channel_list(p[0], 3))),
                ),
            ]
        )

    def session(self) -> ScpiSession:
        return ScpiSession(self.table, self.errors)

    def error(self, s: ScpiSession) -> bytes:
        return s.receive(b"SYST:ERR?\n")[0]


@pytest.fixture
def toy():
    return Toy()


MESSAGE = b"*IDN?\nSOUR:CURR 2.5\nCURR?\nsource:current:level?;:OUTP ON;OUTP?\n"
REPLIES = [b"Maker,Toy,1,0\n", b"2.5\n", b"2.5;1\n"]


def test_whole_message(toy):
    # IEEE 488.2 ch. 7: one reply message per query line, ';'-joined, LF-terminated
    assert toy.session().receive(MESSAGE) == REPLIES


def test_byte_by_byte(toy):
    # the same message arriving one byte at a time gives the same replies (common practice, no source)
    s = toy.session()
    replies = []
    for i in range(len(MESSAGE)):
        replies += s.receive(MESSAGE[i : i + 1])
    assert replies == REPLIES


def test_pieces_at_every_split(toy):
    # every split point of the stream into two pieces (common practice, no source)
    for cut in range(len(MESSAGE) + 1):
        t = Toy()
        s = t.session()
        assert s.receive(MESSAGE[:cut]) + s.receive(MESSAGE[cut:]) == REPLIES


def test_garbage_then_valid(toy):
    # unprintable bytes make a line a command error (-100, SCPI-99 vol. 2 ch. 21); the next
    # line works again
    s = toy.session()
    assert s.receive(b"\x00\xff\x13*IDN?\n*IDN?\n") == [b"Maker,Toy,1,0\n"]
    assert toy.error(s) == b'-100,"Command error"\n'
    assert toy.error(s) == b'0,"No error"\n'


def test_trailing_garbage_without_terminator_waits(toy):
    # a partial line is kept until its LF arrives (IEEE 488.2 ch. 7: LF ends a message)
    s = toy.session()
    assert s.receive(b"*IDN?\n*ID") == [b"Maker,Toy,1,0\n"]
    assert s.receive(b"N?\n") == [b"Maker,Toy,1,0\n"]


def test_unknown_header_gives_113_and_no_reply(toy):
    # SCPI-99 vol. 2 ch. 21: -113 Undefined header; a failed query sends no response
    s = toy.session()
    assert s.receive(b"SOUR:VOLT?\n") == []
    assert toy.error(s) == b'-113,"Undefined header"\n'
    assert s.receive(b"*FOO?\n") == []
    assert toy.error(s) == b'-113,"Undefined header"\n'


def test_unknown_header_stops_the_rest_of_the_line(toy):
    # IEEE 488.2 ch. 7: after a parse error the rest of the program message is not executed
    s = toy.session()
    assert s.receive(b"OUTP ON;BOGUS 1;CURR 1\n") == []
    assert toy.output is True and toy.current == 0.0


def test_short_and_long_forms_case_insensitive(toy):
    # SCPI-99 vol. 1 ch. 6: short form = the upper-case letters, long form = the whole word,
    # any case; optional keywords in brackets may be left out
    s = toy.session()
    for header in (b"SOUR:CURR:LEV", b"source:current:level", b"SoUrCe:CuRr", b"CURR", b"CURRENT", b":CURR"):
        assert s.receive(header + b" 1.25\n") == []
        assert toy.current == 1.25
        toy.current = 0.0
    assert s.receive(b"SOURC:CURR 1\n") == []  # neither short nor long form
    assert toy.error(s) == b'-113,"Undefined header"\n'


def test_relative_path_after_semicolon(toy):
    # SCPI-99 vol. 1 ch. 6.2.4: after ';' a header that is not a root command continues from
    # the previous command's path
    s = toy.session()
    assert s.receive(b"SOUR:CURR:LIM 4;LEV 3;LEV?\n") == [b"3\n"]
    assert toy.limit == 4 and toy.current == 3


def test_parameter_errors(toy):
    # SCPI-99 vol. 2 ch. 21: -222 data out of range, -224 illegal value, -109/-108 counts;
    # an execution error does not stop the rest of the line
    s = toy.session()
    assert s.receive(b"CURR 99;OUTP ON\n") == []
    assert toy.error(s) == b'-222,"Data out of range"\n'
    assert toy.output is True
    s.receive(b"OUTP MAYBE\n")
    assert toy.error(s) == b'-224,"Illegal parameter value"\n'
    s.receive(b"CURR\n")
    assert toy.error(s) == b'-109,"Missing parameter"\n'
    s.receive(b"CURR 1,2\n")
    assert toy.error(s) == b'-108,"Parameter not allowed"\n'
    s.receive(b"CURR nan\n")
    assert toy.error(s) == b'-224,"Illegal parameter value"\n'


def test_queue_overflow_replaces_newest(toy):
    # SCPI-99 vol. 2 ch. 21.8: a full queue keeps its oldest entries and the newest becomes -350
    s = toy.session()
    s.receive(b"NOPE\n" * 20)
    codes = [toy.error(s) for _ in range(17)]
    assert codes[:15] == [b'-113,"Undefined header"\n'] * 15
    assert codes[15] == b'-350,"Queue overflow"\n'
    assert codes[16] == b'0,"No error"\n'


def test_common_commands(toy):
    # IEEE 488.2 ch. 10: *RST, *CLS (clears the error queue), *OPC? returns 1
    s = toy.session()
    s.receive(b"NOPE\n*CLS\n*RST\n")
    assert toy.resets == 1
    assert toy.error(s) == b'0,"No error"\n'
    assert s.receive(b"*OPC?\n") == [b"1\n"]


def test_cr_lf_and_empty_lines(toy):
    # IEEE 488.2 ch. 7: a CR before the LF terminator is white space
    s = toy.session()
    assert s.receive(b"\n\r\n*IDN?\r\n") == [b"Maker,Toy,1,0\n"]
    assert toy.error(s) == b'0,"No error"\n'


def test_binary_block_reply_may_contain_lf(toy):
    # IEEE 488.2 sec. 8.7.9: definite-length block #<d><len><bytes>, bytes may be LF
    s = toy.session()
    out = s.receive(b"FETC:DATA? 4\n")
    assert out == [b"#212" + b"\x00\n\x01" * 4 + b"\n"]
    assert definite_block(b"") == b"#10"


def test_channel_list_with_commas_inside_parentheses(toy):
    # SCPI-99 vol. 1 ch. 8.3.2: channel lists (@1,2,3) and ranges (@1:3)
    s = toy.session()
    assert s.receive(b"ROUT:SCAN? (@1,2,3)\n") == [b"1,2,3\n"]
    assert s.receive(b"ROUT:SCAN? (@1:3)\n") == [b"1,2,3\n"]
    assert s.receive(b"ROUT:SCAN? (@3,1)\n") == [b"3,1\n"]
    assert s.receive(b"ROUT:SCAN? (@1,1)\n") == []
    assert toy.error(s) == b'-224,"Illegal parameter value"\n'


def test_overlong_line_is_dropped(toy):
    # a line longer than the input buffer is a command error (common practice, no source)
    s = toy.session()
    assert s.receive(b"A" * 70000) == []
    assert s.receive(b"B" * 10 + b"\n*IDN?\n") == [b"Maker,Toy,1,0\n"]
    assert toy.error(s) == b'-100,"Command error"\n'
    assert toy.error(s) == b'0,"No error"\n'


def test_bad_pattern_is_refused():
    with pytest.raises(ValueError, match="pattern"):
        CommandTable([Command("SOUR::CURR")])
