"""The scope driver against a device modelled outside gainbench, with pyvisa-sim.

pyvisa-sim (a general-purpose VISA simulation library) serves the two-channel scope of
tests/data/pyvisa_sim/scope.yaml, whose commands differ from the generic-scope profile's
(``*OPC?`` for complete, int8 records, ``ACQ:ONE`` for single acquisitions); the profile
scope-profile.toml adapts the driver to it, so a profile alone drives another scope. The
averaging limit (512) and the error queue are pyvisa-sim's.

pyvisa-sim can serve a binary block, but only as text it sends UTF-8 encoded: channel 1's
payload holds the line feed 0x0A (data, not the end of the reply) and bytes above 0x7F made of
two-byte UTF-8 sequences (U+00C0 -> C3 80, U+00BF -> C2 BF, after the UTF-8 table of RFC 3629,
section 3). Block framing after IEEE Std 488.2-1992, section 8.7.9; int8 codes are two's
complement (common practice, no source): 00 -> 0, 0A -> 10, 7F -> 127, 01 -> 1, C3 -> -61,
80 -> -128, C2 -> -62, BF -> -65, worked by hand, as are the volts and times below
(volts = code * y_scale + y_offset, time = x_origin + k * x_increment, as the profile declares).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from drivers.errors import InstrumentReportedError
from drivers.registry import open_instrument

pytest.importorskip("pyvisa_sim")

DATA = Path(__file__).parents[1] / "data" / "pyvisa_sim"
BACKEND = f"{DATA / 'scope.yaml'}@sim"
PROFILE = str(DATA / "scope-profile.toml")
RESOURCE = "TCPIP::127.0.0.1::5033::SOCKET"

# channel 1, 40 mV per code, -1 V offset: 0 -> -1.0, 10 -> -0.6, 127 -> 4.08, 1 -> -0.96,
# -61 -> -3.44, -128 -> -6.12, -62 -> -3.48, -65 -> -3.6
CH1_VOLTS = [-1.0, -0.6, 4.08, -0.96, -3.44, -6.12, -3.48, -3.6]
# 50 ns per sample from 200 ns before the trigger
TIMES = [-200e-9, -150e-9, -100e-9, -50e-9, 0.0, 50e-9, 100e-9, 150e-9]
# channel 2, "PPPPQQQQ": codes 80 and 81 (ASCII), 12.5 mV per code, no offset: 1.0 and 1.0125 V
CH2_VOLTS = [1.0] * 4 + [1.0125] * 4


@pytest.fixture
def scope():
    drv = open_instrument("detector", "scope", RESOURCE, PROFILE, 2.0, backend=BACKEND)
    yield drv
    drv.close()


def test_identity_and_options_from_the_profile(scope):
    ident = scope.identify()
    assert (ident.maker, ident.model, ident.serial) == ("Test Devices", "TSO-2", "SN0307")
    assert scope.channels == (1, 2) and scope.channel_names == ("probe", "reference")
    assert scope.completion_timeout_s == pytest.approx(1.0)


def test_scaling_and_record_length(scope):
    s = scope.scaling(1)
    assert (s.x_increment, s.x_origin, s.y_scale, s.y_offset) == (5e-8, -2e-7, 0.04, -1.0)
    assert scope.record_length(2) == 8


def test_averaged_acquisition_is_armed_completed_and_read(scope):
    ticks = iter(range(10))
    acq = scope.acquire(averages=16, clock=lambda: float(next(ticks)))
    assert scope.read_averages() == 16
    assert (acq.t_arm, acq.t_complete, acq.averages) == (0.0, 1.0, 16)
    probe, reference = acq.waveforms
    assert probe.volts.tolist() == pytest.approx(CH1_VOLTS, rel=1e-12)
    assert probe.times.tolist() == pytest.approx(TIMES, rel=1e-12, abs=1e-21)
    assert reference.volts.tolist() == pytest.approx(CH2_VOLTS, rel=1e-12)


def test_single_acquisition_uses_its_own_command(scope):
    scope.configure(averages=1)  # ACQ:ONE, then the error queue (empty)
    assert scope.averages == 1
    assert scope.acquire(clock=lambda: 0.0).averages == 1


def test_averages_limit_is_enforced_by_the_device(scope):
    scope.set_averages(64)
    with pytest.raises(InstrumentReportedError) as info:
        scope.set_averages(1000)  # above the device's 512
    assert info.value.code == -113 and "AVGS 1000" in str(info.value)
    assert scope.read_averages() == 64  # unchanged
