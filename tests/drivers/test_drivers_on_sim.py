"""Every driver against the simulated bench, through the real stacks: pyvisa with the
pyvisa-py backend over loopback TCP (SCPI instruments) and pyserial socket:// (the shutter
controller's own line protocol). The simulator's device side shares no code with the drivers,
so these tests check one against the other as two independent readings of the command reference
(simulated_instruments/COMMANDS.md). Each fault raises the driver's typed error within its
timeout and the driver recovers once the fault clears."""

from __future__ import annotations

import time

import numpy as np
import pytest

from bench.config import load_bench, load_bench_text
from drivers.errors import ConnectionLost, InstrumentReportedError, InstrumentTimeout, ReplyError
from drivers.registry import open_instrument
from simulated_instruments.instrument_servers import SimulatedBench


@pytest.fixture(scope="module")
def cfg():
    base = load_bench()
    # add the optional tunable probe source to the bench
    text = base.text.replace(
        "[guard]",
        '[instruments.wavelength]\ndriver = "wavelength-source"\n'
        'resource = "simulated"\nprofile = "generic-wavelength"\ntimeout = "1 s"\n\n[guard]',
        1,
    )
    return load_bench_text(text, "demo + wavelength")


@pytest.fixture
def sim(cfg):
    with SimulatedBench(cfg, speed=1.0) as bench:
        yield bench


def _open(cfg, sim, role, timeout=None):
    inst = cfg.instruments[role]
    return open_instrument(
        role,
        inst.driver,
        sim.resources[role],
        inst.profile,
        timeout if timeout is not None else inst.timeout,
        dict(inst.options),
    )


def test_identities(cfg, sim):
    for role in ("detector", "pump", "shutter", "wavelength"):
        with _open(cfg, sim, role) as drv:
            ident = drv.identify()
            assert ident.maker == "Quillmoor Instruments", (role, ident)


@pytest.mark.parametrize("fmt", ["binary", "ascii"])
def test_digitiser_fetches_contiguous_sample_sets(cfg, sim, fmt):
    with _open(cfg, sim, "detector") as d:
        d.configure(rate_hz=50e3, channels=(1, 2, 3), range_v=2.0, data_format=fmt)
        assert d.rate_hz == pytest.approx(50e3)
        d.start()
        got, expected_index = 0, 0
        deadline = time.monotonic() + 5
        while got < 5000 and time.monotonic() < deadline:
            r = d.fetch(2000)
            if r.data.shape[0]:
                assert r.first_index == expected_index  # no gaps, no repeats
                expected_index += r.data.shape[0]
                got += r.data.shape[0]
                assert r.data.shape[1] == 3
                # probe and reference near their configured levels (0.8 V / 0.6 V plus dark)
                assert 0.5 < float(np.median(r.data[:, 0])) < 1.0
                assert 0.4 < float(np.median(r.data[:, 1])) < 0.8
            else:
                time.sleep(0.01)
        assert got >= 5000
        assert r.lost == 0
        truth = d.sim_truth()
        assert truth["n_total"] == pytest.approx(cfg.sample.n_total)


def test_pump_driver_round_trip(cfg, sim):
    with _open(cfg, sim, "pump") as p:
        assert p.interlock_closed()
        assert not p.output_is_on()
        p.set_current(3.0)
        assert p.current_setpoint() == pytest.approx(3.0)
        p.output(True)
        deadline = time.monotonic() + 2
        while abs(p.measured_current() - 3.0) > 0.01 and time.monotonic() < deadline:
            time.sleep(0.01)
        assert p.measured_current() == pytest.approx(3.0, abs=0.01)
        assert sim.pump_output_on()
        assert p.power() == pytest.approx(cfg.pump.power_at(3.0), rel=1e-6)
        assert 280 < p.mount_temperature() < 320  # kelvin, converted from the instrument's degC
        status = p.read_status()  # one compound query (IEEE 488.2 program message)
        assert status["output_state"] is True and status["interlock"] is True
        p.output(False)
        # OUTP OFF has no reply: a query on the same connection returns only once the
        # instrument has handled it, so the simulator's state is read after the command
        assert not p.output_is_on()
        assert not sim.pump_output_on()


def test_setpoint_above_limit_is_reported(cfg, sim):
    with _open(cfg, sim, "pump") as p:
        p.set_current_limit(5.0)
        with pytest.raises(InstrumentReportedError) as info:
            p.set_current(6.0)
        assert info.value.code == -222  # SCPI "Data out of range"


def test_shutter_over_pyserial_socket(cfg, sim):
    assert sim.resources["shutter"].startswith("socket://127.0.0.1:")
    with _open(cfg, sim, "shutter") as s:
        assert s.is_open("probe")
        s.close_shutter("probe")
        assert not s.is_open("probe")
        s.open_shutter("probe")
        assert s.is_open("probe")


def test_wavelength_source(cfg, sim):
    with _open(cfg, sim, "wavelength") as w:
        lo, hi = w.tuning_range()
        assert lo < cfg.probe.wavelength < hi
        w.set_wavelength(cfg.probe.wavelength + 5e-9)
        w.wait_settled(2.0)
        assert w.wavelength() == pytest.approx(cfg.probe.wavelength + 5e-9)


def test_interlock_fault(cfg, sim):
    with _open(cfg, sim, "pump") as p:
        p.set_current(2.0)
        p.output(True)
        sim.inject("interlock+0.5s")
        deadline = time.monotonic() + 2
        while p.interlock_closed() and time.monotonic() < deadline:
            time.sleep(0.01)
        assert not p.interlock_closed()
        assert not p.output_is_on()  # the hardware interlock switched it off
        with pytest.raises(InstrumentReportedError) as info:
            p.output(True)
        assert info.value.code == 201
        deadline = time.monotonic() + 3
        while not p.interlock_closed() and time.monotonic() < deadline:
            time.sleep(0.02)
        assert p.interlock_closed()  # cleared: the driver works on
        p.instrument_errors()
        p.output(True)
        assert p.output_is_on()


def test_slow_reply_times_out_then_recovers(cfg, sim):
    with _open(cfg, sim, "pump", timeout=0.5) as p:
        sim.inject("slow:pump+0.8s")
        t = time.monotonic()
        with pytest.raises(InstrumentTimeout):
            p.measured_current()
        assert time.monotonic() - t < 2 * 0.5 + 1.5  # within its timeout (one retry after reconnect)
        deadline = time.monotonic() + 10
        while True:
            try:
                p.measured_current()
                break
            except (InstrumentTimeout, ConnectionLost):
                assert time.monotonic() < deadline
        assert p.stats.errors >= 1


def test_garbled_reply_is_a_reply_error_then_recovers(cfg, sim):
    with _open(cfg, sim, "pump") as p:
        sim.inject("garble:pump")
        with pytest.raises(ReplyError):
            for _ in range(3):
                p.measured_current()
                p.current_setpoint()
        assert p.measured_current() >= 0.0


def test_dropped_connection_reconnects(cfg, sim):
    with _open(cfg, sim, "pump") as p:
        assert p.interlock_closed()
        sim.inject("drop:pump")
        time.sleep(0.05)
        # the retry policy reconnects once and resends the (idempotent) query
        assert p.interlock_closed()
        assert p.stats.reconnects >= 1


def test_error_queue_is_drained_after_settings(cfg, sim):
    with _open(cfg, sim, "pump") as p:
        sim.inject("error:pump")
        with pytest.raises(InstrumentReportedError) as info:
            p.set_current(1.0)
        assert info.value.code == 300
        p.set_current(1.0)  # queue empty again
