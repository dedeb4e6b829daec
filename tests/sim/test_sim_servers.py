"""The simulated instruments served on loopback, reached through plain pyvisa and pyserial.

No gainbench driver is used here: each check talks to the servers with the general-purpose
libraries only (pyvisa with the pyvisa-py backend, pyserial's socket:// URL handler, raw
sockets). Framing: IEEE Std 488.2-1992 (LF-terminated messages, sec. 8.7.9 definite-length
blocks); behaviour of the instruments and faults: simulated_instruments/COMMANDS.md.
"""

from __future__ import annotations

import socket
import threading
import time

import numpy as np
import pytest
import pyvisa
import serial

from bench.config import load_bench, load_bench_text
from simulated_instruments.instrument_servers import SimulatedBench
from simulated_instruments.setup_config import SimulatorSetupError

CFG = load_bench()


def wait_for(condition, timeout=5.0, what="condition"):
    """Poll ``condition`` until it is true or the deadline passes (then fail)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.01)
    pytest.fail(f"timed out after {timeout} s waiting for {what}")


@pytest.fixture(scope="module")
def rm():
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


def open_scpi(rm, resource, timeout_ms=2000):
    inst = rm.open_resource(resource, read_termination="\n", write_termination="\n", timeout=timeout_ms)
    return inst


@pytest.fixture
def sim():
    with SimulatedBench(CFG, speed=1.0) as bench:
        yield bench


def test_resources_are_loopback(sim):
    res = sim.resources
    assert set(res) == {"detector", "pump", "shutter"}
    assert res["detector"].startswith("TCPIP::127.0.0.1::") and res["detector"].endswith("::SOCKET")
    assert res["shutter"].startswith("socket://127.0.0.1:")


def test_idn_over_pyvisa(sim, rm):
    det = open_scpi(rm, sim.resources["detector"])
    pump = open_scpi(rm, sim.resources["pump"])
    try:
        assert det.query("*IDN?").startswith("Quillmoor Instruments,QD-2,")
        assert pump.query("*IDN?").startswith("Quillmoor Instruments,QP-40,")
        assert pump.query("SYST:ERR?") == '0,"No error"'
    finally:
        det.close()
        pump.close()


def test_wavelength_source_when_configured(rm):
    text = CFG.text.replace(
        "[guard]",
        '[instruments.wavelength]\ndriver = "tunable-source"\n'
        'resource = "simulated"\nprofile = "qw1-source"\n\n[guard]',
    )
    cfg = load_bench_text(text, "with-source.toml")
    with SimulatedBench(cfg, speed=10.0) as bench:
        src = open_scpi(rm, bench.resources["wavelength"])
        try:
            assert src.query("*IDN?").startswith("Quillmoor Instruments,QW-1,")
            lo, hi = (float(x) for x in src.query("SOUR:WAV:RANG?").split(","))
            assert lo < CFG.probe.wavelength < hi
            src.write(f"SOUR:WAV {hi}")
            assert float(src.query("SOUR:WAV?")) == pytest.approx(hi)
            wait_for(lambda: src.query("STAT:SETT?") == "1", what="the source to settle")
        finally:
            src.close()


def test_shutter_id_over_pyserial(sim):
    port = serial.serial_for_url(sim.resources["shutter"], timeout=2)
    try:
        port.write(b"ID\r")
        assert port.readline() == b"QS-2 shutter controller,Quillmoor Instruments,fw 2.3\r\n"
        port.write(b"SHUT 1\rSTATE 1\r")
        assert port.readline() == b"OK\r\n"
        assert port.readline() == b"SHUT\r\n"
        assert not sim.model.shutter_open(1)
    finally:
        port.close()


def read_block(inst) -> bytes:
    """Read one IEEE 488.2 definite-length block and its LF, with pyvisa's raw byte reads."""
    head = inst.read_bytes(2)
    assert head[:1] == b"#"
    digits = int(head[1:2])
    if digits == 0:
        pytest.fail("indefinite-length block")
    length = int(inst.read_bytes(digits))
    payload = inst.read_bytes(length + 1, break_on_termchar=False)
    assert payload[-1:] == b"\n"
    return payload[:-1]


def test_binary_block_from_fetch(sim, rm):
    det = open_scpi(rm, sim.resources["detector"])
    try:
        det.write("CONF:RATE 100000;:FORM:DATA REAL,32;:ROUT:SCAN (@1,3);:SENS:VOLT:RANG 2;:INIT")
        wait_for(lambda: float(det.query("SYST:TIME?")) > 0.05, what="50 ms of acquisition")
        det.write("FETC:DATA? 2000")
        payload = read_block(det)
        values = np.frombuffer(payload, dtype="<f4").reshape(-1, 2)
        assert values.shape == (2000, 2)
        sim_cfg = CFG.simulation
        assert values[:, 0].mean() == pytest.approx(sim_cfg.probe_signal + sim_cfg.dark_probe, rel=0.01)
        assert abs(values[:, 1].mean()) < 1e-3  # pump monitor, pump off
        assert det.query("FETC:POS?") == "2000"
        assert det.query("FETC:LOST?") == "0"
        det.write("ABOR")
        while True:  # drain, then an empty block
            det.write("FETC:DATA? 100000")
            if not read_block(det):
                break
        det.write("FETC:DATA? 10")
        assert det.read_bytes(4) == b"#10\n"
        assert det.query("SYST:ERR?") == '0,"No error"'
    finally:
        det.close()


def test_ascii_fetch_and_truth(sim, rm):
    det = open_scpi(rm, sim.resources["detector"])
    try:
        det.write("CONF:RATE 10000;:FORM:DATA ASC;:INIT")
        wait_for(
            lambda: int(det.query("FETC:POS?")) == 0 and float(det.query("SYST:TIME?")) > 0.01,
            what="10 ms of acquisition",
        )
        values = [float(v) for v in det.query("FETC:DATA? 10").split(",")]
        assert len(values) == 30
        truth = det.query("SIM:TRUTH?").split(",")
        assert len(truth) == 16  # COMMANDS.md: SIM:TRUTH? has 16 fields
        assert float(truth[6]) == pytest.approx(CFG.sample.n_total, rel=1e-9)
        assert float(truth[7]) == pytest.approx(CFG.sample.length, rel=1e-9)
    finally:
        det.close()


def test_unknown_header_over_socket(sim, rm):
    pump = open_scpi(rm, sim.resources["pump"])
    try:
        pump.write("PUMP:HARDER 11")
        assert pump.query("SYST:ERR?") == '-113,"Undefined header"'
        pump.write("SOUR:CURR 99")
        assert pump.query("SYST:ERR?") == '-222,"Data out of range"'
    finally:
        pump.close()


def test_interlock_fault_switches_the_pump_off(rm):
    with SimulatedBench(CFG, speed=10.0) as bench:
        pump = open_scpi(rm, bench.resources["pump"])
        try:
            assert pump.query("SOUR:CURR 3;:OUTP ON;:OUTP?") == "1"
            assert bench.pump_output_on()
            when = bench.now() + 1.0
            bench.inject(f"interlock@{when}s")
            # nobody talks to the pump: the driver still switches off by itself on time
            wait_for(lambda: not bench.pump_output_on(), what="the interlock to trip the pump")
            assert bench.now() >= when
            assert pump.query("OUTP:INTL?") == "0"
            assert pump.query("OUTP?") == "0"
            assert pump.query("SYST:ERR?") == '201,"Interlock open"'
            pump.write("OUTP ON")
            assert pump.query("OUTP?;SYST:ERR?") == '0;201,"Interlock open"'
        finally:
            pump.close()


def test_interlock_fault_from_the_start(rm):
    with SimulatedBench(CFG, speed=1.0, faults=["interlock"]) as bench:
        pump = open_scpi(rm, bench.resources["pump"])
        try:
            assert pump.query("OUTP:INTL?") == "0"
            pump.write("OUTP ON")
            assert pump.query("OUTP?;SYST:ERR?") == '0;201,"Interlock open"'
        finally:
            pump.close()


def test_sim_fault_command_and_bad_spec(sim, rm):
    det = open_scpi(rm, sim.resources["detector"])
    pump = open_scpi(rm, sim.resources["pump"])
    try:
        assert pump.query("SOUR:CURR 2;:OUTP ON;:OUTP?") == "1"
        det.write("SIM:FAULT interlock")
        assert det.query("*OPC?") == "1"  # the fault has been handled
        assert pump.query("OUTP?;OUTP:INTL?") == "0;0"
        det.write("SIM:FAULT meteor@1s")
        assert det.query("SYST:ERR?") == '-224,"Illegal parameter value"'
    finally:
        det.close()
        pump.close()


def test_drop_closes_the_connection_once(rm):
    with SimulatedBench(CFG, speed=10.0) as bench:
        port = int(bench.resources["pump"].split("::")[2])
        conn = socket.create_connection(("127.0.0.1", port), timeout=5)
        try:
            conn.sendall(b"*OPC?\n")
            assert conn.recv(100) == b"1\n"
            when = bench.now() + 0.5
            bench.inject(f"drop:pump@{when}s")
            # the server closes it at that simulated time: the client sees end of stream
            assert conn.recv(100) == b""
            assert bench.now() >= when
        finally:
            conn.close()
        pump = open_scpi(rm, bench.resources["pump"])  # new connections are still accepted
        try:
            assert pump.query("*OPC?") == "1"
        finally:
            pump.close()


def test_slow_reply_exceeds_a_one_second_timeout(rm):
    with SimulatedBench(CFG, speed=1.0, faults=["slow:pump@0s+100s"]) as bench:
        pump = open_scpi(rm, bench.resources["pump"], timeout_ms=1000)
        try:
            t0 = time.monotonic()
            with pytest.raises(pyvisa.errors.VisaIOError) as err:
                pump.query("*IDN?")
            assert err.value.error_code == pyvisa.constants.StatusCode.error_timeout
            assert time.monotonic() - t0 >= 0.9
        finally:
            pump.close()


def test_slow_one_reply_then_normal(rm):
    with SimulatedBench(CFG, speed=1.0, faults=["slow:detector"]) as bench:
        det = open_scpi(rm, bench.resources["detector"], timeout_ms=6000)
        try:
            t0 = time.monotonic()
            assert det.query("*OPC?") == "1"
            assert time.monotonic() - t0 >= 2.5
            t0 = time.monotonic()
            assert det.query("*OPC?") == "1"
            assert time.monotonic() - t0 < 2.0
        finally:
            det.close()


def test_garbled_replies(rm):
    with SimulatedBench(CFG, speed=1.0, faults=["garble:pump", "garble:shutter@0s+1000s"]) as bench:
        pump = open_scpi(rm, bench.resources["pump"])
        port = serial.serial_for_url(bench.resources["shutter"], timeout=2)
        try:
            first = pump.query("*IDN?")
            assert not first.startswith("Quillmoor") and len(first) == len(
                "Quillmoor Instruments,QP-40,QP40S1123,2.1.4"
            )
            assert pump.query("*IDN?").startswith("Quillmoor Instruments,QP-40")  # one reply only
            port.write(b"ID\r")
            line = port.readline()
            assert line.endswith(b"\r\n") and b"QS-2" not in line
        finally:
            pump.close()
            port.close()


def test_error_fault_fills_the_queue(rm):
    with SimulatedBench(CFG, speed=10.0, faults=["error:pump@0.2s"]) as bench:
        pump = open_scpi(rm, bench.resources["pump"])
        try:
            wait_for(lambda: pump.query("SYST:ERR?") == '300,"Device fault"', what="error 300")
            assert pump.query("SYST:ERR?") == '0,"No error"'
        finally:
            pump.close()


def test_saturation_over_the_socket(rm):
    with SimulatedBench(CFG, speed=1.0, faults=["saturate@0s"]) as bench:
        det = open_scpi(rm, bench.resources["detector"])
        try:
            det.write("SENS:VOLT:RANG 1;:FORM:DATA REAL,32;:ROUT:SCAN (@1);:INIT")
            wait_for(lambda: float(det.query("SYST:TIME?")) > 0.02, what="20 ms of acquisition")
            det.write("FETC:DATA? 100")
            probe = np.frombuffer(read_block(det), dtype="<f4")
            assert np.all(probe == np.float32(1.0 - 2.0 / 2**16))
            assert det.query("SYST:ERR?") == '101,"Input over range"'
        finally:
            det.close()


def test_several_clients_and_a_client_that_vanishes(sim, rm):
    port = int(sim.resources["pump"].split("::")[2])
    rude = socket.create_connection(("127.0.0.1", port))
    rude.sendall(b"*IDN?\nSOUR:CU")  # half a command, then gone
    rude.close()
    a = open_scpi(rm, sim.resources["pump"])
    b = open_scpi(rm, sim.resources["pump"])
    try:
        a.write("SOUR:CURR 1.5")
        # each connection has its own server thread: a's query returns once a's setting is
        # done, so b's query cannot overtake it (IEEE 488.2 sequential commands per connection)
        assert a.query("SOUR:CURR?") == "1.5"
        assert b.query("SOUR:CURR?") == "1.5"
        wait_for(lambda: sim.client_count("pump") == 2, what="the vanished client to be forgotten")
    finally:
        a.close()
        b.close()


def test_close_switches_the_pump_off(rm):
    bench = SimulatedBench(CFG, speed=1.0)
    pump = open_scpi(rm, bench.resources["pump"], timeout_ms=500)
    pump.write("SOUR:CURR 2;:OUTP ON")
    assert pump.query("OUTP?") == "1"
    bench.close()
    assert not bench.model.pump_output_on
    with pytest.raises((pyvisa.errors.VisaIOError, OSError)):
        pump.query("*IDN?")
    pump.close()
    bench.close()  # idempotent
    wait_for(
        lambda: not [t for t in threading.enumerate() if t.name.startswith("sim-")],
        what="the bench's threads to end",
    )


def test_fault_on_a_missing_instrument_is_refused():
    with pytest.raises(SimulatorSetupError, match="wavelength"):
        SimulatedBench(CFG, faults=["drop:wavelength@1s"])
    with pytest.raises(SimulatorSetupError, match="meteor"):
        SimulatedBench(CFG, faults=["meteor"])
