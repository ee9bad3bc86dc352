"""Responders for the shipped dialect families, written from plain descriptions of how such
instruments behave (not from the simulator), with the faults real ones show: the clamp a little
inside the limit, errors left from power-on, booleans as words, error text without quotes,
status words sent as floats. Built on the plain model of tests/instruments/plainsmu.py.

Sense-protection family (description): compliance is a protection level on the sense subsystem;
READ? answers the elements FORM:ELEM names, voltage, current and a status word sent as a float
in which one bit (3 here) is set while the source is in compliance; error entries come as
`code,text` without quotes.

The source-limit, and the mainframe families: see their classes below (SourceLimitSmu,
MainframeSmu).

Supply-like family (description): VOLT and CURR set the level and the current limit; the
readings come from separate MEAS:VOLT? and MEAS:CURR? queries; OUTP? answers ON or OFF; there
is no status word, so only the size of the current tells a clamp.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from tests.instruments.plainsmu import PlainSmu
from tests.instruments.standardsmu import Regulator, Resistor, StandardSmu, _need


@dataclass
class SenseProtectionSmu(PlainSmu):
    compliance_bit: int = 3
    elements: str = ""

    def _one(self, unit: str) -> str | None:
        head, _, arg = unit.partition(" ")
        head = head.upper()
        if head == "READ?":
            volts, amps, limiting = self.point(self.level_v)
            status = float(int(limiting) << self.compliance_bit)
            return f"{volts:+.6E},{amps:+.6E},{status:+.6E}"
        if head == "SYST:ERR?":
            return self.errors.pop(0).replace('"', "") if self.errors else "0,No error"
        if head in ("*IDN?", "*OPC?", "OUTP?"):
            return super()._one(unit)
        known = {
            "SOUR:VOLT:LEV": "VOLT",
            "SENS:CURR:PROT": "CURR:LIM",
            "*RST": "*RST",
            "*CLS": "*CLS",
            "OUTP": "OUTP",
        }
        if head in known:
            return super()._one(f"{known[head]} {arg}".strip())
        ignored = ("SOUR:FUNC", "SOUR:DEL", "SENS:CURR:NPLC", "SENS:CURR:RANG:AUTO", "SENS:FUNC")
        if head == "FORM:ELEM":
            self.elements = arg
        elif head not in ignored:
            self.errors.append('-113,"Undefined header"')
        return None


@dataclass
class SupplySmu(PlainSmu):
    def _one(self, unit: str) -> str | None:
        head, _, arg = unit.partition(" ")
        head = head.upper()
        volts, amps, _ = self.point(self.level_v)
        if head == "MEAS:VOLT?":
            return f"{volts:.5f}"
        if head == "MEAS:CURR?":
            return f"{amps:.7f}"
        if head == "OUTP?":
            return "ON" if self.output_on else "OFF"
        if head == "CURR":
            return super()._one(f"CURR:LIM {arg}")
        if head in ("*IDN?", "*OPC?", "SYST:ERR?", "*RST", "*CLS", "OUTP", "VOLT"):
            return super()._one(unit)
        self.errors.append('-113,"Undefined header"')
        return None


@dataclass
class SourceLimitSmu(StandardSmu):
    """Source-limit family (description): SOUR:VOLT:ILIM sets the current limit of the voltage
    source and SOUR:VOLT:ILIM:TRIP? answers 1 while it is active; SOUR:FUNC VOLT picks the
    source; SOUR:VOLT:DEL is the source delay. Sweep readings go to a buffer, cleared by
    TRAC:CLE and read by index with TRAC:DATA? <first>,<last> (1-based); INIT is overlapped.
    CURR:LIM is not part of this command set (an undefined header)."""

    overlapped: bool = True

    def _family(self, head: str, arg: str) -> tuple[bool, str | bytes | None]:
        if head == "SOUR:VOLT:ILIM":
            self.limit_a = float(arg)
        elif head == "SOUR:VOLT:ILIM:TRIP?":
            return True, "1" if self.limiting else "0"
        elif head == "SOUR:FUNC":
            _need(arg.upper() == "VOLT")
        elif head == "SOUR:VOLT:DEL":
            float(arg)
        elif head == "TRAC:CLE":
            self.buffer = []
        elif head == "TRAC:DATA?":
            first, last = (int(n) for n in arg.split(","))
            _need(1 <= first <= last <= len(self._acquired()))
            return True, self._fetch(first - 1, last)
        elif head in ("SOUR:CURR:LIM", "CURR:LIM", "FETC?"):
            self.errors.append('-113,"Undefined header"')
        else:
            return False, None
        return True, None


_SUFFIXED = re.compile(r"(SOUR|SENS|OUTP|MEAS)(\d*)(.*)")


@dataclass
class MainframeSmu:
    """Mainframe family (description): several independent source-measure channels in one
    box; each channel's nodes carry its number as a suffix (SOURn, SENSn, OUTPn, MEASn?; no
    suffix means 1), a suffix beyond the last channel is -114 "Header suffix out of range"
    (SCPI-1999 Vol 1 6.2.5.2). MEASn? answers voltage, current and a status word (bit 1 while
    the channel limits its current); *RST switches every channel off. Channel k holds device
    k; the clamp sits `clamp_low` below the limit."""

    devices: dict[int, Regulator | Resistor] = field(default_factory=dict)
    clamp_low: float = 0.005
    errors: list[str] = field(default_factory=list)
    state: dict[int, dict[str, float]] = field(default_factory=dict)
    levels_applied: list[tuple[int, float]] = field(default_factory=list)
    most_on: int = 0  # the most channels ever on at once

    def __post_init__(self) -> None:
        self._reset()

    def on(self, channel: int) -> bool:
        return bool(self.state[channel]["on"])

    def respond(self, message: str) -> str | None:
        replies = [r for r in (self._unit(u.strip().lstrip(":")) for u in message.split(";")) if r]
        return ";".join(replies) if replies else None

    def _reset(self) -> None:
        self.state = {k: {"on": 0.0, "volts": 0.0, "limit": 1e-3} for k in self.devices}

    def _unit(self, unit: str) -> str | None:
        head, _, arg = unit.partition(" ")
        head = head.upper()
        common = {
            "*IDN?": lambda: "MAINFRAME,SMU,0001,1.0",
            "*OPC?": lambda: "1",
            "SYST:ERR?": lambda: self.errors.pop(0) if self.errors else '0,"No error"',
            "SYST:ERR:COUN?": lambda: str(len(self.errors)),
        }
        if head in common:
            return common[head]()
        if head in ("*RST", "*CLS"):
            self._reset() if head == "*RST" else self.errors.clear()
            return None
        found = _SUFFIXED.fullmatch(head)
        if not found:
            self.errors.append('-113,"Undefined header"')
            return None
        node, suffix, rest = found.groups()
        channel = int(suffix or 1)
        if channel not in self.state:
            self.errors.append('-114,"Header suffix out of range"')
            return None
        return self._channel(channel, node + rest, arg.strip())

    def _channel(self, channel: int, head: str, arg: str) -> str | None:
        s = self.state[channel]
        if head == "OUTP":
            s["on"] = float(arg.upper() in ("ON", "1"))
            self.most_on = max(self.most_on, sum(1 for k in self.state if self.on(k)))
        elif head == "OUTP?":
            return "1" if s["on"] else "0"
        elif head == "SOUR:VOLT":
            s["volts"] = float(arg)
        elif head == "SOUR:CURR:LIM":
            s["limit"] = float(arg)
        elif head == "MEAS?":
            return self._measure(channel)
        elif head not in (
            "SOUR:FUNC:MODE",
            "SENS:CURR:NPLC",
            "SENS:CURR:RANG",
            "SENS:CURR:RANG:AUTO",
        ):
            self.errors.append('-113,"Undefined header"')
        return None

    def _measure(self, channel: int) -> str:
        s, device = self.state[channel], self.devices[channel]
        volts, amps, limiting = 0.0, 0.0, False
        if s["on"]:
            self.levels_applied.append((channel, s["volts"]))
            volts, amps = s["volts"], device.current(s["volts"])
            if abs(amps) >= s["limit"]:
                amps = s["limit"] * (1 - self.clamp_low)
                volts, limiting = device.voltage_at(amps, s["volts"]), True
        return f"{volts:+.6E},{amps:+.6E},{int(limiting) << 1}"
