"""The pump driver's pulse operations against the simulated QP-40, through the real stack
(pyvisa with the pyvisa-py backend over loopback TCP), as tests/drivers/test_drivers_on_sim.py
does for the other operations. The expected behaviour is the command reference's
(simulated_instruments/COMMANDS.md); SCPI codes after SCPI-99 vol. 2, ch. 21 (-221 settings
conflict, -222 data out of range)."""

from __future__ import annotations

from pathlib import Path

import pytest

from bench.config import load_bench
from drivers.errors import InstrumentReportedError, ProfileError
from drivers.profile import BUILTIN_DIR
from drivers.registry import open_instrument
from simulated_instruments.instrument_servers import SimulatedBench


@pytest.fixture(scope="module")
def cfg():
    return load_bench()


@pytest.fixture
def sim(cfg):
    with SimulatedBench(cfg, speed=1.0) as bench:
        yield bench


def open_pump(cfg, sim, profile=None):
    inst = cfg.instruments["pump"]
    return open_instrument(
        "pump", inst.driver, sim.resources["pump"], profile or inst.profile, inst.timeout, dict(inst.options)
    )


def device_pulses(sim) -> tuple[float, float, bool]:
    with sim.lock:
        pump = sim.model.pump
        return pump.pulse_width, pump.pulse_period, pump.pulse_on


def test_pulsing_is_set_read_back_and_switched_off(cfg, sim):
    with open_pump(cfg, sim) as p:
        assert (p.pulse_width(), p.pulse_period(), p.pulsing()) == (1e-3, 10e-3, False)  # power-on
        p.set_pulsing(200e-6, 1e-3)
        assert p.pulse_width() == pytest.approx(200e-6)
        assert p.pulse_period() == pytest.approx(1e-3)
        assert p.pulsing() is True
        assert device_pulses(sim) == (pytest.approx(200e-6), pytest.approx(1e-3), True)
        p.pulse(False)
        assert p.pulsing() is False and device_pulses(sim)[2] is False


def test_set_pulsing_orders_width_and_period_so_the_device_accepts_both(cfg, sim):
    with open_pump(cfg, sim) as p:
        # from 1 ms / 10 ms to 50 ms / 200 ms: the new width is not below the present period,
        # so the period must go first
        p.set_pulsing(50e-3, 200e-3)
        assert (p.pulse_width(), p.pulse_period()) == (pytest.approx(50e-3), pytest.approx(200e-3))
        # and back down: the width must go first
        p.set_pulsing(10e-6, 100e-6)
        assert (p.pulse_width(), p.pulse_period()) == (pytest.approx(10e-6), pytest.approx(100e-6))


def test_refused_pulse_settings_are_reported(cfg, sim):
    with open_pump(cfg, sim) as p:
        with pytest.raises(InstrumentReportedError) as info:
            p.set_pulse_width(2.0)  # above the device's 1 s
        assert info.value.code == -222 and "SOUR:PULS:WIDT 2" in str(info.value)
        with pytest.raises(InstrumentReportedError) as info:
            p.set_pulse_width(20e-3)  # not below the 10 ms period
        assert info.value.code == -221
        with pytest.raises(ValueError, match="width_s"):
            p.set_pulsing(2e-3, 1e-3)  # refused before anything is sent
        assert device_pulses(sim) == (1e-3, 10e-3, False)


def test_pulsing_and_modulation_exclude_each_other_on_the_device(cfg, sim):
    with open_pump(cfg, sim) as p:
        p.set_modulation(100.0)
        with pytest.raises(InstrumentReportedError) as info:
            p.pulse(True)
        assert info.value.code == -221
        p.set_modulation(None)
        p.pulse(True)
        with pytest.raises(InstrumentReportedError) as info:
            p.set_modulation(100.0)
        assert info.value.code == -221
        p.reset()
        assert (p.pulsing(), p.pulse_width(), p.pulse_period()) == (False, 1e-3, 10e-3)


def test_a_profile_without_pulse_operations_refuses_before_sending(cfg, sim, tmp_path):
    text = (BUILTIN_DIR / "generic-pump.toml").read_text(encoding="utf-8")
    kept = [line for line in text.splitlines() if "PULS" not in line]
    path = Path(tmp_path / "no-pulse.toml")
    path.write_text("\n".join(kept) + "\n", encoding="utf-8")
    with open_pump(cfg, sim, str(path)) as p:
        with pytest.raises(
            ProfileError, match=r"no-pulse\.toml: commands\.set_pulse_width: .*cannot pulse"
        ) as info:
            p.set_pulsing(200e-6, 1e-3)
        assert "commands.set_pulse_period" in str(info.value) and "commands.pulse_on" in str(info.value)
        with pytest.raises(ProfileError, match=r"commands\.pulse_off"):
            p.pulse(False)
        with pytest.raises(ProfileError, match=r"commands\.pulse_state"):
            p.pulsing()
        p.set_current(1.0)  # the rest of the profile works
    assert device_pulses(sim) == (1e-3, 10e-3, False)
