"""The simulated chamber on its own TCP port: one line of text per command, one line per reply.

Its command language is the one dialects/chamber_text.yaml describes (degrees Celsius on the wire,
kelvin inside the model), plus two simulator-only commands for tests:
    SIM:STATE?            time (s), air and mount temperature (degC) at one instant
    SIM:FAULT name,0|1    switch a fault (sensor-open, weak, door, mute) off or on
`mute` is the wire's own fault: from then on no command acts and no query gets a reply, as a
chamber that stopped answering. Time is the wall clock times `speed` (60: one simulated minute
per second), so a run on the simulator waits out a soak in a fraction of its real length. Set
points outside the chamber's own range are refused with -222 and the old one kept, as a chamber
that knows its limits would.
"""

from __future__ import annotations

import socket
import socketserver
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field

from simulator.chamber import FAULTS, Chamber
from simulator.errors import OptionError
from simulator.version import __version__

ZERO_C_K = 273.15
WIRE_FAULTS = frozenset({"mute"})
POLL_S = 0.02


@dataclass
class ChamberOptions:
    host: str = "127.0.0.1"
    port: int = 0
    room_c: float = 23.0
    tau_air_s: float = 120.0
    tau_mount_s: float = 600.0
    reach_k: float = 20.0
    speed: float = 1.0
    lowest_c: float = -70.0
    highest_c: float = 180.0
    faults: tuple[str, ...] = ()


@dataclass
class ChamberUnit:
    """The shared chamber, its error queue and its wire faults, behind one lock."""

    model: Chamber
    lowest_c: float
    highest_c: float
    muted: bool = False
    errors: list[tuple[int, str]] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def respond(self, message: str) -> str | None:
        with self.lock:
            if self.muted and not message.upper().startswith("SIM:FAULT"):
                return None  # a chamber that stopped answering acts on nothing either
            return self._dispatch(message.strip())

    def _dispatch(self, message: str) -> str | None:
        head, _, arg = message.partition(" ")
        head = head.upper()
        if head in _COMMANDS and arg:
            _COMMANDS[head](self, arg.strip())
            return None
        if head in _QUERIES and not arg:
            return _QUERIES[head](self)
        self.errors.append((-113, "undefined header"))
        return None

    def set_point(self, arg: str) -> None:
        celsius = _number(self, arg)
        if celsius is None:
            return
        if not self.lowest_c <= celsius <= self.highest_c:
            self.errors.append((-222, "data out of range"))
            return
        self.model.set_point(celsius + ZERO_C_K)

    def run(self, arg: str) -> None:
        if arg not in ("0", "1"):
            self.errors.append((-224, "illegal parameter value"))
            return
        self.model.start(arg == "1")

    def fault(self, arg: str) -> None:
        name, _, state = arg.partition(",")
        if state not in ("0", "1") or name not in FAULTS | WIRE_FAULTS:
            self.errors.append((-224, "illegal parameter value"))
        elif name in WIRE_FAULTS:
            self.muted = state == "1"
        else:
            self.model.set_fault(name, state == "1")

    def state(self) -> str:
        t, air, mount = self.model.snapshot()
        return f"{t:.9f},{air - ZERO_C_K:.9f},{mount - ZERO_C_K:.9f}"

    def next_error(self) -> str:
        code, text = self.errors.pop(0) if self.errors else (0, "no error")
        return f'{code},"{text}"'


def _number(unit: ChamberUnit, text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        unit.errors.append((-104, "data type error"))
        return None


def _celsius(kelvin: float) -> str:
    return f"{kelvin - ZERO_C_K:.3f}"


_COMMANDS: dict[str, Callable[[ChamberUnit, str], None]] = {
    "SETPOINT": ChamberUnit.set_point,
    "RUN": ChamberUnit.run,
    "SIM:FAULT": ChamberUnit.fault,
}
_QUERIES: dict[str, Callable[[ChamberUnit], str]] = {
    "*IDN?": lambda u: f"CCBENCH,SIMULATED-CHAMBER,SIM000001,{__version__}",
    "SETPOINT?": lambda u: _celsius(u.model.set_point_k),
    # an open sensor's reading stays off scale in degC too: it is sent as it is
    "TEMP?": lambda u: _celsius(u.model.air_reading_k()),
    "MOUNT?": lambda u: _celsius(u.model.mount_k()),
    "RUN?": lambda u: "1" if u.model.running else "0",
    "DOOR?": lambda u: "1" if u.model.door_open else "0",
    "ERR?": ChamberUnit.next_error,
    "SIM:STATE?": ChamberUnit.state,
}


def build_chamber(options: ChamberOptions) -> ChamberUnit:
    if options.speed <= 0 or options.lowest_c >= options.highest_c:
        raise OptionError("chamber", "needs speed > 0 and lowest below highest")
    start = time.monotonic()
    model = Chamber(
        room_k=options.room_c + ZERO_C_K,
        tau_air_s=options.tau_air_s,
        tau_mount_s=options.tau_mount_s,
        reach_k=options.reach_k,
        now=lambda: (time.monotonic() - start) * options.speed,
        set_point_k=options.room_c + ZERO_C_K,
    )
    unit = ChamberUnit(model, options.lowest_c, options.highest_c)
    for name in options.faults:
        if name not in FAULTS | WIRE_FAULTS:
            known = sorted(FAULTS | WIRE_FAULTS)
            raise OptionError("chamber", f"unknown fault {name!r} (one of {known})")
        unit.fault(f"{name},1")
    return unit


class _Handler(socketserver.StreamRequestHandler):
    server: _Server

    def handle(self) -> None:
        self.request.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        try:
            for raw in self.rfile:
                reply = self.server.unit.respond(raw.decode("latin-1").rstrip("\r\n"))
                if reply is not None:
                    self.wfile.write(reply.encode("latin-1") + b"\n")
        except OSError:
            pass  # the client went away mid-exchange


class _Server(socketserver.ThreadingTCPServer):
    allow_reuse_address = True
    daemon_threads = True

    def __init__(self, address: tuple[str, int], unit: ChamberUnit) -> None:
        self.unit = unit
        super().__init__(address, _Handler)


@dataclass
class ChamberHandle:
    unit: ChamberUnit
    host: str
    port: int
    _server: _Server
    _thread: threading.Thread

    @property
    def resource(self) -> str:
        return f"TCPIP0::{self.host}::{self.port}::SOCKET"

    def stop(self) -> None:
        self._server.shutdown()
        self._server.server_close()
        self._thread.join(timeout=5)

    def __enter__(self) -> ChamberHandle:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def start_chamber(options: ChamberOptions | None = None) -> ChamberHandle:
    """Serve a simulated chamber on 127.0.0.1 in a background thread."""
    o = options or ChamberOptions()
    if o.host != "127.0.0.1":
        raise OptionError("host", "the simulated chamber listens on 127.0.0.1 only")
    server = _Server((o.host, o.port), build_chamber(o))
    host, port = server.server_address[:2]
    thread = threading.Thread(
        target=server.serve_forever, args=(POLL_S,), name="chamber-server", daemon=True
    )
    thread.start()
    return ChamberHandle(server.unit, str(host), int(port), server, thread)
