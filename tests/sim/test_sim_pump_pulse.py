"""The simulated QP-40's pulse commands on their own (the device side, fed bytes without a
socket), against its command reference, simulated_instruments/COMMANDS.md: ranges, defaults,
the width below the period, no pulsing while modulating, SCPI error codes (SCPI-99 vol. 2,
ch. 21: -221 settings conflict, -222 data out of range, -224 illegal parameter value)."""

from __future__ import annotations

import pytest

from bench.config import load_bench
from simulated_instruments.clock import SimClock
from simulated_instruments.optical_setup import BenchModel
from simulated_instruments.pump_device import PumpDriverDevice
from simulated_instruments.shared_state import BenchCore


@pytest.fixture
def qp40():
    core = BenchCore(BenchModel(load_bench()), SimClock(1.0))
    session = PumpDriverDevice(core).session()

    def ask(line: str) -> str:
        with core.lock:
            replies = session.receive(line.encode("ascii") + b"\n")
        return b"".join(replies).decode("ascii").rstrip("\n")

    return ask


def test_power_on_pulse_settings(qp40):
    assert qp40("SOUR:PULS:WIDT?;SOUR:PULS:PER?;SOUR:PULS?") == "0.001;0.01;0"


def test_width_period_and_state_round_trip_in_short_and_long_forms(qp40):
    qp40("SOUR:PULS:WIDT 2E-4")
    qp40("SOURCE:PULSE:PERIOD 0.005")
    qp40("PULS ON")
    assert qp40("PULS:WIDT?;PULS:PER?;PULS:STAT?") == "0.0002;0.005;1"
    assert qp40("SYST:ERR?") == '0,"No error"'
    qp40("SOUR:PULS 0")
    assert qp40("SOUR:PULS?") == "0"


@pytest.mark.parametrize(
    "command, code",
    [
        ("SOUR:PULS:WIDT 5E-7", '-222,"Data out of range"'),  # below 1 us
        ("SOUR:PULS:WIDT 2", '-222,"Data out of range"'),  # above 1 s
        ("SOUR:PULS:PER 5E-6", '-222,"Data out of range"'),  # below 10 us
        ("SOUR:PULS:PER 11", '-222,"Data out of range"'),  # above 10 s
        ("SOUR:PULS:WIDT 0.01", '-221,"Settings conflict"'),  # not below the 10 ms period
        ("SOUR:PULS:PER 0.001", '-221,"Settings conflict"'),  # not above the 1 ms width
        ("SOUR:PULS:WIDT abc", '-224,"Illegal parameter value"'),
        ("SOUR:PULS MAYBE", '-224,"Illegal parameter value"'),
    ],
)
def test_refused_settings_leave_the_pulses_as_they_were(qp40, command, code):
    qp40(command)
    assert qp40("SYST:ERR?") == code
    assert qp40("SOUR:PULS:WIDT?;SOUR:PULS:PER?;SOUR:PULS?") == "0.001;0.01;0"


def test_pulsing_and_modulation_exclude_each_other(qp40):
    qp40("SOUR:MOD ON")
    qp40("SOUR:PULS ON")
    assert qp40("SYST:ERR?") == '-221,"Settings conflict"'
    assert qp40("SOUR:PULS?;SOUR:MOD?") == "0;1"
    qp40("SOUR:MOD OFF;:SOUR:PULS ON")
    qp40("SOUR:MOD ON")
    assert qp40("SYST:ERR?") == '-221,"Settings conflict"'
    assert qp40("SOUR:PULS?;SOUR:MOD?") == "1;0"


def test_reset_restores_the_pulse_defaults(qp40):
    qp40("SOUR:PULS:PER 1;:SOUR:PULS:WIDT 0.5;:SOUR:PULS ON")
    assert qp40("SOUR:PULS:WIDT?;SOUR:PULS:PER?;SOUR:PULS?") == "0.5;1;1"
    qp40("*RST")
    assert qp40("SOUR:PULS:WIDT?;SOUR:PULS:PER?;SOUR:PULS?") == "0.001;0.01;0"
