"""The fault matrix: each fault kind at each phase of a hazardous-voltage run, injected behind
the wire by the simulator's own fault schedule (simulator/faults.py), armed from a second
connection before the run. The run itself goes through pyvisa-py over TCP. Whatever the fault,
a second, independent connection then reads the output: off, every time; the device measured
before the fault is kept, the one it hit is stored as aborted, and the last line on screen says
why and how the output was left."""

from __future__ import annotations

import socket
from pathlib import Path

import pytest
from rich.console import Console

from sequencer.cli.main import main
from simulator import SimOptions
from simulator.server import ServerHandle, start_server
from tests.safety.bench import read_output, write_bench
from tests.safety.test_guard import read_rows

STATION = {
    "instrument": {"resource": "set per test", "timeout": "500 ms"},
    "tray": {"channels": 3},
    "limits": {"max_voltage": "60 V", "max_current": "20 mA", "max_power": "500 mW"},
}
# 0, 5, ... 55 V: the tenth level, 45 V, is the first above the touch-safe 42 V.
RECIPE = {
    "steps": [
        {"sweep": {"name": "iv", "start": "0 V", "stop": "55 V", "points": 12,
                   "compliance": "5 mA"}},
        {"spot": {"name": "at-test-voltage", "voltage": "25 V", "compliance": "5 mA",
                  "repeats": 2, "on_compliance": "trip"}},
    ],
    "hazardous_voltage": "acknowledged",
    "on_trip": "skip",
}  # fmt: skip

# Where each phase of the second device is hit (the first device completes untouched): the
# command of that phase, and the query the driver sends in it (a lost or garbled reply needs a
# query; a refused or cut command needs a command).
PHASES = {
    "configure": {"command": "on=SOUR:CURR:LIM,channel=2",
                  "query": "on=SYST:ERR?,channel=2,after=1"},
    "ramp": {"command": "on=SOUR:VOLT,channel=2,after=9", "query": "on=SYST:INT?,channel=2"},
    "measure": {"command": "on=point,channel=2,after=9", "query": "on=READ?,channel=2,after=9"},
    "between devices": {"command": "on=ROUT:CLOS,after=1", "query": "on=SYST:ERR?,channel=2"},
}  # fmt: skip
# Our kind -> (the simulator's kind, which target of the phase it hits).
KINDS = {
    "timeout": ("no-reply", "query"),
    "disconnect": ("close", "query"),
    "garbage": ("garbage", "query"),
    "scpi error": ("error", "command"),
    "interlock opening": ("lid-open", "query"),
    "device short": ("device-short", "query"),
}
# What each cell must end in: exit code and words of the last line on screen.
EXPECTED = {
    "timeout": (4, "no complete reply within 0.5 s"),
    "disconnect": (4, "reconnected once and switched the output off (read back)"),
    "garbage": (4, "reply"),
    "scpi error": (4, "injected fault on"),
    "interlock opening": (3, "refused 45 V: the fixture interlock reads open"),
    "device short": (0, "output off (read back from the instrument)"),
}
# With the lid opening while 45 V is applied, the instrument itself switches off and says so.
EXPECTED[("interlock opening", "measure")] = (4, "interlock opened, output switched off")


def fault_text(kind: str, phase: str) -> str:
    sim_kind, target = KINDS[kind]
    return f"{sim_kind}:{PHASES[phase][target]}"


@pytest.fixture
def sim():
    with start_server(SimOptions(devices=3, clock="virtual", seed=11)) as server:
        yield server


def arm(server: ServerHandle, text: str) -> None:
    """Arm a fault from a connection of our own; it counts from now on."""
    assert int(read_output(server.resource, f'SIM:FAUL "{text}";:SIM:FAUL:PEND?')) >= 1


def run_on(server: ServerHandle, folder: Path) -> tuple[int, str]:
    station = {**STATION, "instrument": {**STATION["instrument"], "resource": server.resource}}
    path = write_bench(folder, station=station, recipe=RECIPE)
    console = Console(record=True, width=400, highlight=False)
    code = main(["run", str(path), "--out", str(folder / "run")], console=console)
    return code, console.export_text()


@pytest.mark.sim
@pytest.mark.robustness
@pytest.mark.parametrize("phase", list(PHASES))
@pytest.mark.parametrize("kind", list(KINDS))
def test_fault_matrix_output_is_off_afterwards(tmp_path, sim: ServerHandle, kind, phase):
    arm(sim, fault_text(kind, phase))
    code, text = run_on(sim, tmp_path)
    assert read_output(sim.resource, "SIM:FAUL:FIR?") == "1", "the fault never fired"
    last = text.strip().splitlines()[-1]
    assert read_output(sim.resource) == "0", last  # a second, independent connection
    assert float(read_output(sim.resource, "SIM:LEV:MAX?")) <= 55.0
    want_code, words = EXPECTED.get((kind, phase), EXPECTED[kind])
    assert code == want_code, text
    assert words in last
    assert "THE OUTPUT MAY STILL BE ON" not in text
    rows = read_rows(tmp_path / "run")
    assert rows[0]["verdict"] != "aborted"  # measured before the fault: kept
    assert rows[1]["verdict"] == "aborted"
    if kind == "device short":
        assert "must not clamp" in rows[1]["reasons"] and len(rows) == 3  # on_trip: skip


def clear_faults(server: ServerHandle) -> None:
    """Disarm over a bare socket: open_visa's own *IDN? would meet the armed fault."""
    with socket.create_connection((server.host, server.port)) as raw:
        raw.sendall(b"SIM:FAUL:CLE;:SIM:FAUL:PEND?\n")
        assert raw.recv(64).strip() == b"0"


@pytest.mark.sim
@pytest.mark.robustness
def test_an_instrument_gone_for_good_is_reported_as_possibly_on(tmp_path, sim: ServerHandle):
    """The one case software cannot help: the link drops at 45 V and every reconnect is cut
    at its *IDN?. The tool must say the output may still be on, and it must be true."""
    arm(sim, "close:on=READ?,channel=2,after=9")
    arm(sim, "close:on=*IDN?,after=2,count=0")  # the run's probe and identify pass
    code, text = run_on(sim, tmp_path)
    last = text.strip().splitlines()[-1]
    assert code == 6  # an output not known to be off: this code wins over the instrument's 4
    assert "THE OUTPUT MAY STILL BE ON" in last and "reconnecting failed" in last
    clear_faults(sim)
    assert read_output(sim.resource) == "1"  # the report did not lie
    read_output(sim.resource, "OUTP OFF;*OPC?")
