"""A small SMU responder written from a plain description of how a bench SMU behaves, not from
the project's simulator, so that the driver is tried against behaviour it was not written with.

The description (common practice, no source): the SMU sources a voltage and limits the current;
while it limits, the current it delivers sits within its limit accuracy of the limit, here a
set fraction below it (a real clamp is as often a little low as a little high). A device on the
terminals is a resistor, or a short (a resistor of a few ohms). The error queue answers
`code,"text"` and `0,"No error"` when empty, and may hold entries from before the connection
(power-on errors). *RST switches the output off and forgets the limit. Unknown commands queue
-113. Replies end in LF. A status word carries the limiting state in a chosen bit, for single
readings and, separately, for list readings.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass
class PlainSmu:
    """`respond(command)` for a ScriptedServer: bytes for a query, None for a command."""

    ohms: float = 10e3
    clamp_low: float = 0.005  # the clamp sits this fraction below the limit
    single_bit: int | None = 1  # bit of the single reading's status word; None: no status word
    list_bit: int | None = 3  # bit of the list reading's status word
    errors: list[str] = field(default_factory=list)
    output_on: bool = False
    level_v: float = 0.0
    limit_a: float = 1e-3
    list_v: tuple[float, ...] = ()
    trace: list[tuple[float, float, bool]] = field(default_factory=list)
    # A two-terminal device instead of the resistor (tests/instruments/standardsmu.py Regulator
    # or Resistor): its current(volts) and voltage_at(amps, most).
    device: Any = None

    def respond(self, message: str) -> bytes | None:
        replies = [r for r in (self._one(u.strip().lstrip(":")) for u in message.split(";")) if r]
        return ((";".join(replies)) + "\n").encode() if replies else None

    def point(self, volts: float) -> tuple[float, float, bool]:
        """(voltage, current, limiting) at the terminals for `volts` programmed."""
        if not self.output_on:
            return 0.0, 0.0, False
        wanted = volts / self.ohms if self.device is None else self.device.current(volts)
        if abs(wanted) < self.limit_a:
            return volts, wanted, False
        amps = self.limit_a * (1 - self.clamp_low)
        if self.device is not None:
            return self.device.voltage_at(amps, volts), amps, True
        return amps * self.ohms, amps, True

    # -- commands ---------------------------------------------------------------------------

    def _one(self, unit: str) -> str | None:
        head, _, arg = unit.partition(" ")
        head = head.upper()
        simple = {
            "*IDN?": lambda: "PLAIN,SMU,0,1",
            "*OPC?": lambda: "1",
            "SYST:ERR?": self._next_error,
            "OUTP?": lambda: "1" if self.output_on else "0",
            "MEAS?": self._measure,
            "FETC?": self._fetch,
        }
        if head in simple:
            return simple[head]()
        if not self._command(head, arg):
            self.errors.append('-113,"Undefined header"')
        return None

    def _command(self, head: str, arg: str) -> bool:
        if head == "*RST":
            self.output_on, self.level_v, self.limit_a, self.list_v = False, 0.0, 1e-3, ()
        elif head == "*CLS":
            self.errors.clear()
        elif head == "OUTP":
            self.output_on = arg.upper() in ("ON", "1")
        elif head == "VOLT":
            self.level_v = float(arg)
        elif head == "CURR:LIM":
            self.limit_a = float(arg)
        elif head == "LIST:VOLT":
            self.list_v = tuple(float(v) for v in arg.split(","))
        elif head == "INIT":
            self.trace = [self.point(v) for v in self.list_v]
        else:
            return head in ("LIST:COUN", "VOLT:MODE")
        return True

    def _next_error(self) -> str:
        return self.errors.pop(0) if self.errors else '0,"No error"'

    def _measure(self) -> str:
        volts, amps, limiting = self.point(self.level_v)
        fields = [f"{volts:.6E}", f"{amps:.6E}"]
        if self.single_bit is not None:
            fields.append(str(int(limiting) << self.single_bit))
        return ",".join(fields)

    def _fetch(self) -> str:
        bit = self.list_bit if self.list_bit is not None else 0
        return ",".join(f"{v:.6E},{i:.6E},{int(limiting) << bit}" for v, i, limiting in self.trace)
