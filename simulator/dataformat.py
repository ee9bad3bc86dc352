"""How buffered readings leave the instrument: FORMat[:DATA], FORMat:BORDer, FORMat:FIELds.

- ASCii (the *RST default): NR3 numbers (the status field NR1), comma-separated, reading after
  reading.
- REAL,32: one IEEE 488.2 definite-length block `#<n><len><payload>` of float32 values in the
  same order (the status field as a float32 integer); the server ends it with "\\n" like any
  reply. Never the indefinite `#0` form.
- Byte order of REAL: NORMal (the *RST default) sends the most significant byte first, i.e.
  big-endian (numpy '>f4', pyvisa is_big_endian=True); SWAPped sends little-endian ('<f4').
- [SENSe:]FUNCtion[:ON] names what each reading carries, in that order, as a SCPI-1999
  instrument's readings carry the functions it senses (after *RST: voltage and current).
- FORMat:FIELds (our own node, sent after it) chooses what each reading carries: VOLTage,
  CURRent and STATus
  (the QUEStionable condition of that reading, bit 1 = current limit active), in the order
  given; the default VOLTage,CURRent keeps READ? as "<v>,<i>".
The format applies to READ? and FETCh?; MEASure:...? always answers one NR3 number.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from simulator.smu_model import Reading

FIELDS = ("VOLTage", "CURRent", "STATus")
QUES_CURRENT = 2


@dataclass(frozen=True)
class DataFormat:
    data: str = "ASCii"  # or "REAL" (32-bit floats)
    byte_order: str = "NORMal"  # or "SWAPped"
    fields: tuple[str, ...] = ("VOLTage", "CURRent")

    def render(self, readings: Sequence[Reading]) -> str:
        """The reply text of READ?/FETCh? for these readings (a block as latin-1 text)."""
        if self.data == "ASCii":
            return ",".join(_ascii(reading, name) for reading in readings for name in self.fields)
        values = [_value(reading, name) for reading in readings for name in self.fields]
        dtype = ">f4" if self.byte_order == "NORMal" else "<f4"
        return block(np.asarray(values, dtype=dtype).tobytes()).decode("latin-1")


def block(payload: bytes) -> bytes:
    """IEEE 488.2 definite-length arbitrary block (without the terminator)."""
    length = str(len(payload)).encode()
    return b"#" + str(len(length)).encode() + length + payload


def _value(reading: Reading, name: str) -> float:
    if name == "VOLTage":
        return reading.voltage_v
    if name == "CURRent":
        return reading.current_a
    return float(QUES_CURRENT if reading.limited else 0)


def _ascii(reading: Reading, name: str) -> str:
    if name == "STATus":
        return str(QUES_CURRENT if reading.limited else 0)
    return f"{_value(reading, name):+.6E}"
