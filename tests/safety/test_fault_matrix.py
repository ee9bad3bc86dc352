"""The fault matrix: each fault kind at each phase of a hazardous-voltage run, injected behind
the wire by a proxy between the driver (pyvisa-py over TCP) and the simulator. Whatever the
fault, a second, independent connection straight to the simulator then reads the output: off,
every time; the devices measured before the fault are kept, the one it hit is stored as
aborted, and the last line on screen says why and how the output was left."""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path

import pytest
from rich.console import Console

from sequencer.cli import main
from simulator import SimOptions
from simulator.devices import short_circuit
from simulator.server import ServerHandle, start_server

from .bench import read_output, write_bench
from .proxy import KINDS, Fault, FaultProxy
from .test_guard import put_device, read_rows

LEVEL = re.compile(r"^SOUR:VOLT (\S+)$")
HOT_V = 45.0  # the first level of the sweep above the touch-safe 42 V

STATION = {
    "instrument": {"resource": "set per test", "timeout": "500 ms"},
    "tray": {"channels": 3},
    "limits": {"max_voltage": "60 V", "max_current": "20 mA", "max_power": "500 mW"},
}
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


def phase_trigger(phase: str) -> Callable[[str], bool]:
    """A trigger firing at `phase` of the second device (the first one completes untouched)."""
    state = {"second": False, "hot": False}

    def trigger(message: str) -> bool:
        if message == "ROUT:CLOS (@2)":
            state["second"] = True
            return phase == "between devices"
        if not state["second"]:
            return False
        level = LEVEL.match(message)
        if level and float(level.group(1)) >= HOT_V:
            first_hot, state["hot"] = not state["hot"], True
            return phase == "ramp" and first_hot
        if phase == "configure":
            return message.startswith("SOUR:CURR:LIM")
        return phase == "measure" and state["hot"] and message.startswith("READ?")

    return trigger


PHASES = ("configure", "ramp", "measure", "between devices")
# What each fault kind must end in: exit code, and words of the last line on screen.
EXPECTED = {
    "timeout": (4, "no complete reply within 0.5 s"),
    "disconnect": (4, "reconnected once and switched the output off (read back)"),
    "garbage": (4, "reply"),
    "scpi_error": (4, '-113,"Undefined header'),
    "lid_open": (3, "the fixture interlock reads open"),
    "short": (0, "output off (read back from the instrument)"),
}


@pytest.fixture
def sim():
    with start_server(SimOptions(devices=3, clock="virtual", seed=11)) as server:
        yield server


def run_through(proxy: FaultProxy, folder: Path) -> tuple[int, str]:
    station = {**STATION, "instrument": {**STATION["instrument"], "resource": proxy.resource}}
    path = write_bench(folder, station=station, recipe=RECIPE)
    console = Console(record=True, width=400, highlight=False)
    code = main(["run", str(path), "--out", str(folder / "run")], console=console)
    return code, console.export_text()


@pytest.mark.sim
@pytest.mark.robustness
@pytest.mark.parametrize("phase", PHASES)
@pytest.mark.parametrize("kind", KINDS)
def test_fault_matrix_output_is_off_afterwards(tmp_path, sim: ServerHandle, kind, phase):
    def short() -> None:
        with sim.instrument.lock:
            put_device(sim.instrument, 2, short_circuit())

    fault = Fault(kind, phase_trigger(phase), on_short=short)
    with FaultProxy(sim.port, fault) as proxy:
        code, text = run_through(proxy, tmp_path)
    assert fault.fired_at is not None, f"the {kind} fault never fired in phase {phase}"
    last = text.strip().splitlines()[-1]
    assert read_output(sim.resource) == "0", last  # straight to the simulator, not the proxy
    assert float(read_output(sim.resource, "SIM:LEV:MAX?")) <= 55.0
    want_code, words = EXPECTED[kind]
    assert code == want_code, text
    assert words in last
    assert "THE OUTPUT MAY STILL BE ON" not in text
    rows = read_rows(tmp_path / "run")
    assert rows[0]["verdict"] != "aborted"  # measured before the fault: kept
    assert rows[1]["verdict"] == "aborted"
    if kind == "disconnect":
        assert proxy.connections == 2  # the run's connection and the one reconnect
    if kind == "short":
        assert "must not clamp" in rows[1]["reasons"] and len(rows) == 3  # on_trip: skip


@pytest.mark.sim
@pytest.mark.robustness
def test_an_instrument_gone_for_good_is_reported_as_possibly_on(tmp_path, sim: ServerHandle):
    """The one case where software cannot switch the output off: it must say so, loudly."""
    fault = Fault("disconnect", phase_trigger("measure"), dead=True)
    with FaultProxy(sim.port, fault) as proxy:
        code, text = run_through(proxy, tmp_path)
    last = text.strip().splitlines()[-1]
    assert code == 4
    assert "THE OUTPUT MAY STILL BE ON" in last and "reconnecting failed" in last
    assert read_output(sim.resource) == "1"  # true: the report did not lie
    read_output(sim.resource, "OUTP OFF;*OPC?")
