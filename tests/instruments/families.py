"""Responders for the shipped dialect families, written from plain descriptions of how such
instruments behave (not from the simulator), with the faults real ones show: the clamp a little
inside the limit, errors left from power-on, booleans as words, error text without quotes,
status words sent as floats. Built on the plain model of tests/instruments/plainsmu.py.

Sense-protection family (description): compliance is a protection level on the sense subsystem;
READ? answers the elements FORM:ELEM names, voltage, current and a status word sent as a float
in which one bit (3 here) is set while the source is in compliance; error entries come as
`code,text` without quotes.

Supply-like family (description): VOLT and CURR set the level and the current limit; the
readings come from separate MEAS:VOLT? and MEAS:CURR? queries; OUTP? answers ON or OFF; there
is no status word, so only the size of the current tells a clamp.
"""

from __future__ import annotations

from dataclasses import dataclass

from tests.instruments.plainsmu import PlainSmu


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
