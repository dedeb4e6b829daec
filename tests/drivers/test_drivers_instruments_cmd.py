"""`gainbench instruments`: identifies reachable instruments and says why the others are not.

The instruments are a few lines of plain socket code on 127.0.0.1 (sharing nothing with the
drivers); replies follow IEEE Std 488.2-1992 10.14 (``*IDN?``) and SCPI 1999 volume 2 21.8
(``SYST:ERR?``).
"""

from __future__ import annotations

import argparse
import socket
import threading

import pytest

from bench.commands import instruments as cmd
from bench.config import builtin_bench_path


def serve(replies: dict[bytes, bytes], terminator: bytes = b"\n") -> socket.socket:
    """Answer each line found in ``replies``; a daemon thread per connection."""
    listener = socket.create_server(("127.0.0.1", 0))

    def handle(conn: socket.socket) -> None:
        buf = b""
        with conn:
            while True:
                try:
                    data = conn.recv(4096)
                except OSError:
                    return
                if not data:
                    return
                buf += data
                while terminator in buf:
                    line, buf = buf.split(terminator, 1)
                    if line in replies:
                        conn.sendall(replies[line])

    def accept() -> None:
        while True:
            try:
                conn, _ = listener.accept()
            except OSError:
                return
            threading.Thread(target=handle, args=(conn,), daemon=True).start()

    threading.Thread(target=accept, daemon=True).start()
    return listener


@pytest.fixture
def bench_file(tmp_path):
    detector = serve({b"*IDN?": b"Loopback Devices,DG-3,0002,0.1\n"})
    pump = serve({b"*IDN?": b"Loopback Devices,LD-1,0001,0.1\n"})
    shutter = serve({b"ID": b"LS-1 shutter box,Loopback Devices,fw 0.1\r\n"}, terminator=b"\r")
    ports = {
        name: s.getsockname()[1] for name, s in (("detector", detector), ("pump", pump), ("shutter", shutter))
    }
    text = builtin_bench_path().read_text(encoding="utf-8").replace("simulated = true", "simulated = false")
    resources = iter(
        [
            f'resource = "TCPIP::127.0.0.1::{ports["detector"]}::SOCKET"',
            f'resource = "socket://127.0.0.1:{ports["pump"]}"',
            f'resource = "socket://127.0.0.1:{ports["shutter"]}"',
        ]
    )
    while 'resource = "simulated"' in text:
        text = text.replace('resource = "simulated"', next(resources), 1)
    path = tmp_path / "bench.toml"
    path.write_text(text, encoding="utf-8")
    yield path
    for s in (detector, pump, shutter):
        s.close()


def args_for(path, no_scan=False) -> argparse.Namespace:
    parser = argparse.ArgumentParser()
    cmd.configure(parser)
    argv = ["--config", str(path)] + (["--no-scan"] if no_scan else [])
    return parser.parse_args(argv)


def test_command_contract():
    assert cmd.NAME == "instruments" and cmd.HELP
    assert callable(cmd.configure) and callable(cmd.run)


def test_all_instruments_identified(bench_file, capsys):
    assert cmd.run(args_for(bench_file)) == 0
    out = capsys.readouterr().out
    assert "VISA resources" in out and "Serial ports" in out
    assert "Loopback Devices, DG-3, serial 0002, firmware 0.1" in out
    assert "Loopback Devices, LD-1, serial 0001" in out
    assert "LS-1 shutter box" in out
    assert "not reached" not in out


def test_unreachable_instrument_gives_its_reason(bench_file, capsys):
    with socket.create_server(("127.0.0.1", 0)) as s:
        closed_port = s.getsockname()[1]
    text = bench_file.read_text(encoding="utf-8")
    start = text.index("[instruments.pump]")
    line_start = text.index("resource = ", start)
    line_end = text.index("\n", line_start)
    text = text[:line_start] + f'resource = "socket://127.0.0.1:{closed_port}"' + text[line_end:]
    bench_file.write_text(text, encoding="utf-8")
    assert cmd.run(args_for(bench_file, no_scan=True)) == 1
    out = capsys.readouterr().out
    assert "VISA resources" not in out
    pump_part = out[out.index("  pump") :]
    assert "not reached: pump instrument (socket://127.0.0.1:" in pump_part
    assert "could not open the port" in pump_part
    assert "DG-3" in out  # the others are still identified


def test_listing_failures_are_reported_not_raised():
    found, why, _notes = cmd.visa_resources("/no/such/visa/library.so")
    assert found == [] and why
    ports, why = cmd.serial_ports()
    assert isinstance(ports, list) and isinstance(why, str)


def test_simulated_bench_when_it_exists(capsys):
    pytest.importorskip("simulated_instruments.instrument_servers")
    assert cmd.run(args_for(builtin_bench_path(), no_scan=True)) == 0
    assert "Quillmoor Instruments" in capsys.readouterr().out
