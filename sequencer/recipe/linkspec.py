"""How the computer reaches one instrument, beside its resource string: the VISA library, the
line terminators (overriding the dialect's) and, for a serial (ASRL) resource, the line settings.

    instrument:
      resource: ASRL/dev/ttyUSB0::INSTR
      visa_library: "@py"            # the pure-Python backend (default); or a VISA library path
      read_termination: CR           # LF, CR or CRLF; left out: the dialect's (LF by default)
      write_termination: CR
      serial: {baud: 9600, data_bits: 8, parity: none, stop_bits: 1, flow_control: none,
               echo: false}

`echo: true` is for an instrument that sends every command back before any reply (some
RS-232 instruments do, as a terminal would): the driver reads each echo and checks it, so an
echo is never taken for a reply. The values are plain words and numbers; the transport maps them
to pyvisa's (instruments.transport).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

# The keys are described (and checked) in sequencer.recipe.format.station; these are their values.
TERMINATORS = ("LF", "CR", "CRLF")
BAUDS = (300, 600, 1200, 2400, 4800, 9600, 19200, 38400, 57600, 115200, 230400, 460800, 921600)
PARITIES = ("none", "odd", "even", "mark", "space")
STOP_BITS = (1, 1.5, 2)
FLOW_CONTROLS = ("none", "xon_xoff", "rts_cts", "dtr_dsr")
LINK_KEYS = ("visa_library", "read_termination", "write_termination", "serial")


@dataclass(frozen=True)
class SerialSettings:
    baud: int = 9600
    data_bits: int = 8
    parity: str = "none"
    stop_bits: float = 1
    flow_control: str = "none"
    echo: bool = False


@dataclass(frozen=True)
class LinkSettings:
    visa_library: str = "@py"
    read_termination: str | None = None  # None: the dialect's
    write_termination: str | None = None
    serial: SerialSettings | None = None  # only for ASRL resources

    def connect_options(self) -> dict[str, Any]:
        """The keyword arguments instruments.connect takes for these settings."""
        serial = None if self.serial is None else vars(self.serial).copy()
        terms = (self.read_termination, self.write_termination)
        return {"visa_library": self.visa_library, "terminators": terms, "serial": serial}


NO_LINK_SETTINGS = LinkSettings()  # the defaults: "@py", the dialect's terminators, no serial
