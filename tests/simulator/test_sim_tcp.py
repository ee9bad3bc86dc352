"""The simulator on the wire: pyvisa-py over TCP, raw sockets, and the `serve` program."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from simulator import ServerHandle, SimOptions, start_server
from simulator import server as server_module

ROOT = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.sim


@pytest.fixture
def served() -> Iterator[ServerHandle]:
    handle = start_server(SimOptions(clock="virtual", devices=4))
    yield handle
    handle.stop()


@pytest.fixture
def visa():
    pyvisa = pytest.importorskip("pyvisa")
    rm = pyvisa.ResourceManager("@py")
    opened = []

    def open_resource(resource: str):
        inst = rm.open_resource(
            resource, read_termination="\n", write_termination="\n", timeout=2000
        )
        opened.append(inst)
        return inst

    yield open_resource
    for inst in opened:
        inst.close()
    rm.close()


def raw_exchange(port: int, payloads: list[bytes], replies: int) -> list[bytes]:
    with socket.create_connection(("127.0.0.1", port), timeout=2) as sock:
        for payload in payloads:
            sock.sendall(payload)
        data = b""
        while data.count(b"\n") < replies:
            data += sock.recv(4096)
    return data.splitlines()


def test_pyvisa_session_runs_the_driver_messages(served: ServerHandle, visa):
    inst = visa(served.resource)
    assert inst.query("*IDN?") == "CCBENCH,SIMULATED-SMU,SIM000001,0.1.0"
    for message in (
        "*RST",
        "*CLS",
        "SOUR:FUNC:MODE VOLT",
        "SOUR:CURR:LIM 1.0E-02",
        "TRIG:DEL 1.0E-03",
        "SENS:CURR:NPLC 1.0E+00",
        "SENS:CURR:RANG:AUTO ON",
        'SENS:FUNC "VOLT","CURR"',
        "ROUT:CLOS (@2)",
        "SOUR:VOLT 2.5E+01",
        "OUTP ON",
    ):
        inst.write(message)  # fmt: skip
    v, i, status = inst.query("READ?;:STAT:QUES:COND?").replace(";", ",").split(",")
    assert float(v) == pytest.approx(25.0, abs=1e-3)
    assert float(i) == pytest.approx(1.8e-3, rel=0.2) and status == "0"
    assert inst.query("SYST:ERR?") == '0,"No error"'
    second = visa(served.resource)  # another connection sees the same instrument
    assert second.query("OUTP?") == "1"
    inst.write("OUTP OFF")
    assert inst.query("*OPC?") == "1"  # the write has been executed
    assert second.query("OUTP?") == "0"


@pytest.mark.parametrize(("order", "big_endian"), [("NORM", True), ("SWAP", False)])
def test_binary_block_reads_through_pyvisa_and_ends_with_a_newline(
    served: ServerHandle, visa, order: str, big_endian: bool
):
    inst = visa(served.resource)
    levels = np.linspace(0.0, 30.0, 301)  # 301 x 2 float32 = 2408 bytes, LF bytes likely inside
    inst.write("ROUT:CLOS (@1);:CURR:LIM 10 MA;:OUTP ON;:VOLT:MODE LIST;:TRIG:COUN 301")
    inst.write("LIST:VOLT " + ",".join(f"{v:.2f}" for v in levels))
    inst.write(f"FORM REAL,32;:FORM:BORD {order}")
    values = inst.query_binary_values(
        "READ?", datatype="f", is_big_endian=big_endian, container=np.array
    )  # pyvisa expects the LF after the block by default (expect_termination=True)
    np.testing.assert_allclose(values[0::2], levels, atol=1e-3)
    assert inst.query("FORM ASC;:FETC?").count(",") == 2 * 301 - 1  # still in step
    raw = raw_exchange(served.port, [b"FORM REAL,32;:FETC?\n"], 1)
    assert raw[0].startswith(b"#42408")  # definite length, 4 digits


def test_byte_stream_crlf_and_split_messages(served: ServerHandle):
    lines = raw_exchange(served.port, [b"*OPC?\r\n*IDN", b"?\n:SIM:TRAY:COUN?;*OPC?\n"], 3)
    assert lines[0] == b"1" and lines[1].startswith(b"CCBENCH,") and lines[2] == b"4;1"


def test_overlong_message_is_dropped_with_input_buffer_overrun(served, monkeypatch):
    monkeypatch.setattr(server_module, "MAX_MESSAGE_BYTES", 1000)
    long_message = b"VOLT " + b"1" * 2500
    lines = raw_exchange(served.port, [long_message, long_message, b"\nSYST:ERR?\n*OPC?\n"], 2)
    assert lines == [b'-363,"Input buffer overrun;message too long"', b"1"]


def test_stop_releases_the_port_and_drops_clients():
    handle = start_server(SimOptions(clock="virtual"))
    with socket.create_connection(("127.0.0.1", handle.port), timeout=2) as client:
        client.sendall(b"*OPC?\n")
        assert client.recv(10) == b"1\n"  # connected and served
        handle.stop()
        assert client.recv(10) == b""  # the server closed the connection
    with socket.create_server(("127.0.0.1", handle.port)):  # the port is free again
        pass


def _serve(*extra: str) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    command = [sys.executable, "-m", "simulator", "serve", "--port", "0", *extra]
    return subprocess.Popen(
        command, cwd=ROOT, env=env, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
        stderr=subprocess.PIPE, text=True,
    )  # fmt: skip


def test_serve_prints_the_resource_and_exits_when_stdin_closes(visa):
    proc = _serve("--exit-with-stdin", "--seed", "7", "--clock", "virtual")
    try:
        resource = proc.stdout.readline().strip()
        assert resource.startswith("TCPIP0::127.0.0.1::") and resource.endswith("::SOCKET")
        assert visa(resource).query("*IDN?").startswith("CCBENCH,SIMULATED-SMU,SIM000007,")
        proc.stdin.close()
        assert proc.wait(timeout=10) == 0
        assert proc.stdout.read() == ""  # exactly one line on stdout
    finally:
        proc.kill()
        proc.wait()
        proc.stdout.close()
        proc.stderr.close()


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_serve_exits_cleanly_on_signals(signum):
    proc = _serve()
    try:
        assert proc.stdout.readline().startswith("TCPIP0::127.0.0.1::")
        proc.send_signal(signum)
        assert proc.wait(timeout=10) == 0
    finally:
        proc.kill()
        proc.wait()
        for stream in (proc.stdin, proc.stdout, proc.stderr):
            stream.close()


def test_serve_refuses_bad_options_with_one_line():
    proc = _serve("--preset", "FLC-9.9")
    out, err = proc.communicate(timeout=10)
    assert proc.returncode == 2 and out == ""
    assert err.strip().count("\n") == 0 and "FLC-1.8" in err
