"""Test benches for the safety tests: station and recipe files written from dicts, the simulated
instrument reached in process (same SCPI text, no socket) or over TCP, and an independent second
connection that reads what the output is doing."""

from __future__ import annotations

import re
import socket
import subprocess
import sys
import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from instruments import Connection, ScpiSmu, load_dialect
from instruments.loopback import CallableTransport
from instruments.scpi import message_units
from instruments.transport import open_visa
from simulator import Session, SimOptions, build_instrument
from simulator.instrument import Instrument

ROOT = Path(__file__).resolve().parents[2]
SET_VOLTAGE = re.compile(r"^SOUR:VOLT (\S+)$")
SET_LIMIT = re.compile(r"^SOUR:CURR:LIM (\S+)$")

STATION: dict[str, Any] = {
    "station": "TEST-bench",
    "instrument": {"resource": "sim", "timeout": "1 s"},
    "tray": {"channels": 3},
    "limits": {"max_voltage": "60 V", "max_current": "20 mA", "max_power": "250 mW"},
    "fixture": {"interlocked": True},
}
RECIPE: dict[str, Any] = {
    "product": "FLC-1.8 test part",
    "lot": "FK2611-99",
    "station": "station.yaml",
    "nplc": 0.01,
    "steps": [
        {"sweep": {"name": "iv", "start": "0 V", "stop": "30 V", "points": 16,
                   "compliance": "5 mA"}},
        {"spot": {"name": "at-test-voltage", "voltage": "25 V", "compliance": "5 mA",
                  "repeats": 2}},
    ],
}  # fmt: skip


def write_bench(
    folder: Path, *, station: dict[str, Any] | None = None, recipe: dict[str, Any] | None = None
) -> Path:
    """Write station.yaml and recipe.yaml (defaults above, top-level keys replaced); returns
    the recipe's path."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "station.yaml").write_text(yaml.safe_dump({**STATION, **(station or {})}))
    path = folder / "recipe.yaml"
    path.write_text(yaml.safe_dump({**RECIPE, **(recipe or {})}, sort_keys=False))
    return path


@dataclass
class LoopBench:
    """A simulated instrument reached in process; `sent` is every command the driver sent, in
    order, compound messages split into their commands (instruments.scpi.message_units)."""

    instrument: Instrument
    sent: list[str] = field(default_factory=list)

    def handler(self, message: str) -> str | None:
        self.sent.extend(message_units(message))
        return self.session.handle(message)

    def __post_init__(self) -> None:
        self.session = Session(self.instrument)

    def smu(self) -> ScpiSmu:
        return ScpiSmu(CallableTransport(self.handler, "loop"), load_dialect("scpi1999"))

    def connection(self) -> Connection:
        smu = self.smu()
        smu.identify()
        return Connection(smu, "loop", timeout_s=1.0, spy_log=None, simulator=None)

    def levels_sent(self) -> list[float]:
        return [float(m.group(1)) for s in self.sent if (m := SET_VOLTAGE.match(s))]

    def limits_sent(self) -> list[float]:
        return [float(m.group(1)) for s in self.sent if (m := SET_LIMIT.match(s))]

    def points(self) -> list[tuple[float, float]]:
        """(level, compliance in force) for every level sent, in order."""
        limit, out = 0.0, []
        for message in self.sent:
            if m := SET_LIMIT.match(message):
                limit = float(m.group(1))
            elif m := SET_VOLTAGE.match(message):
                out.append((float(m.group(1)), limit))
        return out


def loop_bench(devices: int = 3, **options: Any) -> LoopBench:
    opts = {"clock": "virtual", "devices": devices, **options}
    return LoopBench(build_instrument(SimOptions(**opts)))


def read_output(resource: str, query: str = "OUTP?") -> str:
    """Ask the instrument over a second, independent connection (not the tool's)."""
    transport = open_visa(resource, timeout_s=2.0)
    try:
        return transport.query(query)
    finally:
        transport.close()


@dataclass
class SimProcess:
    """`python -m simulator serve --port 0` as its own program, as an operator would start it."""

    process: subprocess.Popen[str]
    resource: str

    def stop(self) -> None:
        self.process.terminate()
        try:
            self.process.communicate(timeout=5)  # also closes the pipes
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.communicate()


def start_sim_process(*args: str) -> SimProcess:
    process = subprocess.Popen(
        [sys.executable, "-m", "simulator", "serve", "--port", "0", *args],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip
    line = process.stdout.readline().strip() if process.stdout else ""
    if not line.startswith("TCPIP0::"):
        process.kill()
        raise RuntimeError(f"simulator did not start: {line!r}")
    return SimProcess(process, line)


class SilentInstrument:
    """An instrument that accepts the connection, takes in every message and never answers
    anything, not even *IDN? (a hung controller, a device listening on the wrong protocol).
    `received` is every message, in order. Use it as a context manager."""

    def __init__(self) -> None:
        self.received: list[str] = []
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.05)
        self.resource = f"TCPIP0::127.0.0.1::{self._listener.getsockname()[1]}::SOCKET"
        self._stop = threading.Event()
        self._threads = [threading.Thread(target=self._accept, daemon=True)]

    def __enter__(self) -> SilentInstrument:
        self._threads[0].start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        for thread in self._threads:
            thread.join(timeout=5)
        self._listener.close()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._listener.accept()
            except TimeoutError:
                continue
            thread = threading.Thread(target=self._listen, args=(conn,), daemon=True)
            self._threads.append(thread)
            thread.start()

    def _listen(self, conn: socket.socket) -> None:
        conn.settimeout(0.05)
        pending = b""
        with conn:
            while not self._stop.is_set():
                try:
                    data = conn.recv(65536)
                except TimeoutError:
                    continue
                except OSError:
                    return
                if not data:
                    return
                pending += data
                *messages, pending = pending.split(b"\n")
                self.received += [m.decode(errors="replace").strip() for m in messages]


def run_cli(
    args: list[str], *, cwd: Path = ROOT, timeout: float = 60
) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=cwd, capture_output=True, text=True, timeout=timeout,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def never(*_: Any, **__: Any) -> Any:
    raise AssertionError("nothing may be opened or started after a refusal")


Patch = Callable[[Any, str, Any], None]
