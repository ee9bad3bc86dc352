"""The simulator on a pseudo-terminal, reached as `ASRL/dev/pts/N::INSTR` through pyvisa-py and
pyserial (SCPI.md s1.7). Data kept small: pyvisa-py reads serial ports one byte at a time."""

from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from instruments.dialect import load_dialect
from instruments.errors import ReplyError
from instruments.smu import ScpiSmu
from instruments.transport import open_visa
from simulator import ServerHandle, SimOptions, start_server
from simulator.faults import parse_fault
from simulator.serial_port import SerialHandle, start_serial

pytest.importorskip("serial")  # pyvisa-py's ASRL sessions need pyserial (the `serial` extra)
pytestmark = pytest.mark.sim
ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def served() -> Iterator[tuple[ServerHandle, SerialHandle]]:
    faults = (parse_fault("garbage:on=OUTP?,after=1"),)
    handle = start_server(SimOptions(clock="virtual", devices=2, spread=0.0, faults=faults))
    serial = start_serial(handle.instrument)
    yield handle, serial
    serial.stop()
    handle.stop()


def test_the_driver_measures_over_the_serial_port(served) -> None:
    tcp, serial = served
    assert serial.resource.startswith("ASRL/dev/pts/") and serial.resource.endswith("::INSTR")
    smu = ScpiSmu(open_visa(serial.resource, timeout_s=1.0), load_dialect("scpi1999"))
    try:
        assert smu.identify().startswith("CCBENCH,SIMULATED-SMU,SIM000001,")
        smu.select_channel(1)
        smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
        smu.set_voltage(25.0)
        smu.output(True)
        reading = smu.measure()
        assert reading.voltage_v == pytest.approx(25.0, abs=5 * 50e-6)
        assert reading.current_a == pytest.approx(1.84033e-3, rel=1e-4)  # REFERENCES.md s2
        second = open_visa(tcp.resource, timeout_s=1.0)  # the same instrument over TCP
        assert second.query("OUTP?") == "1"
        second.close()
        with pytest.raises(ReplyError):
            smu.output_is_on()  # the second OUTP? answers garbage (a fault)
        assert smu.output_is_on() is True  # resynchronised on the serial line
    finally:
        smu.safe_state()
        smu.close()


def test_serve_with_serial_prints_both_resources() -> None:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    command = [sys.executable, "-m", "simulator", "serve", "--serial", "--exit-with-stdin"]
    proc = subprocess.Popen(
        command, cwd=ROOT, env=env, stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert proc.stdout.readline().startswith("TCPIP0::127.0.0.1::")
        resource = proc.stdout.readline().strip()
        smu_link = open_visa(resource, timeout_s=1.0)
        assert smu_link.query("SIM:TRAY:COUN?") == "20"
        smu_link.close()
        proc.stdin.close()
        assert proc.wait(timeout=10) == 0
    finally:
        proc.kill()
        proc.wait()
        proc.stdout.close()
