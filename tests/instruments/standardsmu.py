"""A responder for an SMU that speaks plain SCPI-1999 and nothing else, written from the
standard's description (shared SCPI.md section 3; IEEE 488.2 for the common commands and
blocks), not from the project's simulator.

The description: short forms, optional nodes ([SOURce:], [SENSe:], [:LEVel], [:IMMediate],
[:AMPLitude], [:STATe], [:SEQuence], [:DC], [:UPPer], [:NEXT], [:ON]) written or left out; each
message unit of a compound message starts again from the root (";:"). A reading carries the
functions SENSe:FUNCtion names, in that order (after *RST: current only); there is no status
word per buffered reading. The QUEStionable condition has bit 1 (CURRent) set while the
current limit is active, and latches into the event register (STAT:QUES[:EVEN]?, cleared
by reading). FORMat ASCii, or REAL with 32 or 64 bits, in the byte order FORMat:BORDer
sets (NORMal: most significant byte first); the block is definite (#<n><len>) or, as an option,
indefinite (#0 ... terminator). Errors queue as code,"text"; unknown headers are -113. The
tray's switch matrix closes one channel at a time with ROUTe:CLOSe (@n).

Options for the variety real instruments show: no answer to *IDN? (it is then an undefined
header), an extra element at the end of each reading (a time stamp), and an overlapped
INITiate whose acquisition continues while later commands are read (FETCh? before it ends
answers what was acquired so far; *OPC? answers once it ends; *WAI holds later commands until
then). The acquisition ends only at a wait, never on a clock: a test never depends on speed.

A device on a tray channel is a JFET current source (tests/support/textbook.py, textbook
equations) or a resistor; while the source limits, its current sits `clamp_low` below the limit.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass, field

from scipy.optimize import brentq

from tests.support.textbook import self_biased_current

_ORDERS = ("NORM", "SWAP")
_OPTIONAL = (":LEV", ":IMM", ":AMPL", ":STAT", ":SEQ", ":DC", ":UPP", ":NEXT", ":SCAL")


@dataclass(frozen=True)
class Regulator:
    """A self-biased JFET: two terminals, a regulated current above its knee."""

    idss: float = 6e-3
    vp: float = -2.0
    lam: float = 0.002
    rs: float = 600.0

    def current(self, volts: float) -> float:
        return self_biased_current(volts, self.idss, self.vp, self.lam, self.rs)

    def voltage_at(self, amps: float, most: float) -> float:
        """The voltage at which the device draws `amps` (at most `most`)."""
        if self.current(most) <= amps:
            return most
        return brentq(lambda v: self.current(v) - amps, 0.0, most, xtol=1e-9)


@dataclass(frozen=True)
class Resistor:
    ohms: float

    def current(self, volts: float) -> float:
        return volts / self.ohms

    def voltage_at(self, amps: float, most: float) -> float:
        return min(amps * self.ohms, most)


@dataclass
class StandardSmu:
    devices: dict[int, Regulator | Resistor] = field(default_factory=lambda: {1: Regulator()})
    clamp_low: float = 0.005
    errors: list[str] = field(default_factory=list)
    answers_idn: bool = True
    block: str = "definite"  # or "indefinite"
    extra_element: bool = False
    overlapped: bool = False  # INITiate returns before its acquisition ends
    lid_closed: bool | None = None  # None: no interlock query
    output_on: bool = False
    level_v: float = 0.0
    limit_a: float = 1e-3
    functions: tuple[str, ...] = ("CURR",)
    mode: str = "FIX"
    list_v: tuple[float, ...] = ()
    count: int = 1
    data: str = "ASC"
    bits: int = 32
    big_endian: bool = True
    closed: int | None = None
    buffer: list[tuple[float, float, bool]] = field(default_factory=list)
    limiting: bool = False
    running: bool = False  # an overlapped acquisition not yet waited for
    levels_applied: list[float] = field(default_factory=list)
    ques_event: int = 0

    def respond(self, message: str) -> str | bytes | None:
        replies = [r for r in (self._unit(u) for u in message.split(";")) if r is not None]
        if not replies:
            return None
        if all(isinstance(r, str) for r in replies):
            return ";".join(str(r) for r in replies)
        parts = [r if isinstance(r, bytes) else r.encode() for r in replies]
        return b";".join(parts)

    # -- the device at the terminals -----------------------------------------------------------

    def device(self) -> Regulator | Resistor | None:
        channel = self.closed if len(self.devices) > 1 else 1
        return self.devices.get(channel) if channel is not None else None

    def point(self, volts: float) -> tuple[float, float, bool]:
        device = self.device()
        if not self.output_on or device is None:
            return (volts if self.output_on else 0.0), 0.0, False
        self.levels_applied.append(volts)
        wanted = device.current(volts)
        if abs(wanted) < self.limit_a:
            return volts, wanted, False
        amps = self.limit_a * (1 - self.clamp_low)
        self.ques_event |= 2  # QUEStionable CURRent latches (read and cleared by STAT:QUES?)
        return device.voltage_at(amps, volts), amps, True

    # -- program message units -------------------------------------------------------------

    def _unit(self, unit: str) -> str | bytes | None:
        raw, _, arg = unit.strip().lstrip(":").partition(" ")
        head, arg = _canon(raw), arg.strip()
        try:
            handled, reply = self._family(raw.upper(), arg)
            return reply if handled else self._dispatch(head, arg)
        except (ValueError, IndexError):
            self.errors.append('-224,"Illegal parameter value"')
            return None

    def _family(self, head: str, arg: str) -> tuple[bool, str | bytes | None]:
        """A family's own headers (as written, upper case) before the standard ones: (handled,
        reply). The standard instrument has none."""
        return False, None

    def _dispatch(self, head: str, arg: str) -> str | bytes | None:
        queries = {
            "*OPC?": self._operation_complete,
            "*ESR?": lambda: "0",
            "SYST:ERR?": lambda: self.errors.pop(0) if self.errors else '0,"No error"',
            "SYST:ERR:COUN?": lambda: str(len(self.errors)),
            "SYST:VERS?": lambda: "1999.0",
            "OUTP?": lambda: "1" if self.output_on else "0",
            "READ?": self._read,
            "FETC?": self._fetch,
            "STAT:QUES:COND?": lambda: str(2 if self.limiting else 0),
            "STAT:QUES:EVEN?": self._take_event,
            "STAT:QUES?": self._take_event,
            "VOLT?": lambda: f"{self.level_v:+.6E}",
        }
        if head == "*IDN?" and self.answers_idn:
            return "STANDARD,SMU,0001,1.0"
        if head == "SYST:INT?" and self.lid_closed is not None:
            return "1" if self.lid_closed else "0"
        if head in queries:
            return queries[head]()
        if not self._command(head, arg):
            self.errors.append('-113,"Undefined header"')
        return None

    def _command(self, head: str, arg: str) -> bool:
        setters = {
            "*RST": lambda: self._reset(),
            "*CLS": self.errors.clear,
            "*WAI": self._wait,
            "*OPC": lambda: None,
            "OUTP": lambda: self._output(arg),
            "VOLT": lambda: self._level(float(arg)),
            "CURR:LIM": lambda: setattr(self, "limit_a", float(arg)),
            "FUNC:MODE": lambda: _need(arg.upper() in ("VOLT", "VOLTAGE")),
            "FUNC": lambda: setattr(self, "functions", _functions(arg)),
            "TRIG:DEL": lambda: float(arg),
            "CURR:NPLC": lambda: float(arg),
            "CURR:RANG": lambda: float(arg),
            "CURR:RANG:AUTO": lambda: _need(arg.upper() in ("ON", "1")),
            "ROUT:CLOS": lambda: setattr(self, "closed", _channel(arg)),
            "ROUT:OPEN:ALL": lambda: setattr(self, "closed", None),
            "VOLT:MODE": lambda: setattr(self, "mode", _choice(arg, ("FIX", "LIST"))),
            "LIST:VOLT": lambda: setattr(self, "list_v", tuple(map(float, arg.split(",")))),
            "TRIG:COUN": lambda: setattr(self, "count", int(arg)),
            "INIT": self._initiate,
            "ABOR": lambda: None,
            "FORM": lambda: self._format(arg),
            "FORM:BORD": lambda: setattr(self, "big_endian", _choice(arg, _ORDERS) == "NORM"),
        }
        if head not in setters:
            return False
        setters[head]()
        return True

    def _reset(self) -> None:
        self.output_on, self.level_v, self.limit_a, self.functions = False, 0.0, 1e-3, ("CURR",)
        self.mode, self.list_v, self.count, self.data, self.bits = "FIX", (), 1, "ASC", 32
        self.big_endian, self.buffer, self.limiting = True, [], False

    def _output(self, arg: str) -> None:
        self.output_on = _choice(arg, ("ON", "OFF", "1", "0")) in ("ON", "1")
        self.buffer = []

    def _level(self, volts: float) -> None:
        self.level_v = volts
        self.buffer = []

    def _format(self, arg: str) -> None:
        kind, _, bits = arg.upper().partition(",")
        if kind in ("ASC", "ASCII"):
            self.data = "ASC"
            return
        _need(kind == "REAL" and bits.strip() in ("", "32", "64"))
        self.data, self.bits = "REAL", int(bits or 32)

    def _initiate(self) -> None:
        levels = self.list_v if self.mode == "LIST" else (self.level_v,) * self.count
        self.buffer = [self.point(v) for v in levels]
        self.running = self.overlapped
        if self.buffer:
            self.limiting = self.buffer[-1][2]

    def _acquired(self) -> list[tuple[float, float, bool]]:
        """What an overlapped acquisition has taken so far (half of it until a wait), or all."""
        return self.buffer[: len(self.buffer) // 2] if self.running else self.buffer

    def _wait(self) -> None:
        self.running = False

    def _take_event(self) -> str:
        value, self.ques_event = self.ques_event, 0
        return str(value)

    def _operation_complete(self) -> str:
        self._wait()
        return "1"

    def _read(self) -> str | bytes:
        self._initiate()
        self.running = False  # READ? answers when its reading is taken
        return self._fetch()

    def _fetch(self, first: int = 0, last: int | None = None) -> str | bytes:
        values: list[float] = []
        for volts, amps, _ in self._acquired()[first:last]:
            values += [volts if name.startswith("VOLT") else amps for name in self.functions]
            values += [12.5] if self.extra_element else []  # a time stamp, in seconds
        if self.data == "ASC":
            return ",".join(f"{v:+.6E}" for v in values)
        letter = "d" if self.bits == 64 else "f"
        payload = struct.pack((">" if self.big_endian else "<") + letter * len(values), *values)
        if self.block == "indefinite":
            return b"#0" + payload
        length = str(len(payload)).encode()
        return b"#" + str(len(length)).encode() + length + payload


def _canon(head: str) -> str:
    """The header without optional nodes: 'SOUR:VOLT:LEV:IMM' -> 'VOLT'."""
    head = head.upper()
    for root in ("SOUR:", "SENS:"):
        head = head.removeprefix(root)
    query = head.endswith("?")
    head = head.removesuffix("?")
    for node in _OPTIONAL:
        head = head.replace(node, "")
    head = head.removesuffix(":ON")
    return head + ("?" if query else "")


def _need(condition: bool) -> None:
    if not condition:
        raise ValueError("refused")


def _choice(arg: str, choices: tuple[str, ...]) -> str:
    word = arg.strip().upper()
    _need(word in choices)
    return word


def _functions(arg: str) -> tuple[str, ...]:
    names = tuple(name.strip().strip('"').upper() for name in arg.split(","))
    _need(all(name in ("VOLT", "CURR", "VOLT:DC", "CURR:DC") for name in names))
    return names


def _channel(arg: str) -> int:
    text = arg.strip()
    _need(text.startswith("(@") and text.endswith(")"))
    return int(text[2:-1])
