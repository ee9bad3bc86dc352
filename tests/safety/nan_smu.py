"""A small SMU on a real TCP socket that starts answering SCPI's "not a number" for its current.

Written from a description, not from the simulator: an SMU speaking the SCPI-1999 mnemonics of
`instruments/dialects/scpi1999.yaml`, sourcing a voltage into a 20 kOhm load with a current
limit, one program message a line, message units split at ';' and answered in order, joined
by ';'. After `good_readings` readings it reports every current as `bad_value`: SCPI-1999
Vol 1 7.2.1.4-7.2.1.5 (as quoted in SCPI.md) gives 9.91E37 for NaN and 9.9E37 for +INF.
Source lists run at INIT and are fetched with FETC?, voltage and current per reading (no
status per reading in SCPI-1999), in ASCII or as an IEEE 488.2 definite-length block of
little-endian float32 (FORM REAL,32 with FORM:BORD SWAP).
"""

from __future__ import annotations

import socket
import struct
import threading
from dataclasses import dataclass, field

LOAD_OHM = 20e3
COMPLIANCE_BIT = 2  # bit 1 of the QUEStionable condition register (the dialect's compliance_bit)


@dataclass
class SmuState:
    output_on: bool = False
    level_v: float = 0.0
    limit_a: float = 0.1
    readings: int = 0
    binary: bool = False
    list_levels: list[float] = field(default_factory=list)
    buffer: list[tuple[float, float, int]] = field(default_factory=list)
    highest_v: float = 0.0  # the largest level the output carried while on


class NanSmu:
    """Serve on 127.0.0.1 (a free port) until `close()`; state survives reconnects."""

    def __init__(self, good_readings: int, bad_value: str = "9.91E37") -> None:
        self.good_readings = good_readings
        self.bad_value = bad_value
        self.state = SmuState()
        self.received: list[str] = []
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.05)
        self.resource = f"TCPIP0::127.0.0.1::{self._listener.getsockname()[1]}::SOCKET"
        self._thread = threading.Thread(target=self._accept, daemon=True)
        self._thread.start()

    def close(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5)
        self._listener.close()

    # -- the instrument ----------------------------------------------------------------------

    def _reading(self, volts: float) -> tuple[float, float, int]:
        s = self.state
        s.readings += 1
        applied = volts if s.output_on else 0.0
        amps = min(abs(applied) / LOAD_OHM, s.limit_a)
        status = COMPLIANCE_BIT if amps >= s.limit_a else 0
        if s.readings > self.good_readings:
            amps = float(self.bad_value)
        return applied, amps, status

    def _unit(self, unit: str) -> str | bytes | None:
        s = self.state
        header, _, arg = unit.strip().lstrip(":").partition(" ")
        header = header.upper()
        if header == "SOUR:VOLT":
            s.level_v = float(arg)
        elif header == "SOUR:CURR:LIM":
            s.limit_a = float(arg)
        elif header == "OUTP":
            s.output_on = arg.strip().upper() in ("ON", "1")
        elif header == "SOUR:LIST:VOLT":
            s.list_levels = [float(v) for v in arg.split(",")]
        elif header == "FORM":
            s.binary = arg.strip().upper().startswith("REAL")
        elif header == "INIT":
            s.buffer = [self._reading(v) for v in s.list_levels]
            s.level_v = s.list_levels[-1]
        if s.output_on:
            s.highest_v = max(s.highest_v, abs(s.level_v))
        return self._query(header) if header.endswith("?") else None

    def _query(self, header: str) -> str | bytes:
        s = self.state
        if header == "READ?":
            volts, amps, status = self._reading(s.level_v)
            s.buffer = [(volts, amps, status)]
            return f"{volts:+.6E},{amps:+.6E}" if amps < 1e37 else f"{volts:+.6E},{self.bad_value}"
        if header == "STAT:QUES:COND?":
            return str(s.buffer[-1][2] if s.buffer else 0)
        if header == "FETC?":
            return self._fetch()
        answers = {"*IDN?": "RESPONDER,NAN-SMU,0,1", "*OPC?": "1", "SYST:ERR?": '0,"No error"',
                   "SYST:ERR:COUN?": "0", "OUTP?": "1" if s.output_on else "0",
                   "SYST:INT?": "1"}  # fmt: skip
        return answers.get(header, "0")

    def _fetch(self) -> str | bytes:
        # SCPI-1999: a buffered reading carries the sensed functions, voltage and current
        values = [x for volts, amps, _ in self.state.buffer for x in (volts, amps)]
        if not self.state.binary:
            return ",".join(f"{v:+.6E}" for v in values)
        payload = struct.pack(f"<{len(values)}f", *values)
        length = str(len(payload)).encode()
        return b"#" + str(len(length)).encode() + length + payload

    # -- the socket --------------------------------------------------------------------------

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._listener.accept()
            except TimeoutError:
                continue
            threading.Thread(target=self._serve, args=(conn,), daemon=True).start()

    def _serve(self, conn: socket.socket) -> None:
        conn.settimeout(0.05)
        buffer = b""
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
                buffer += data
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    reply = self._message(line.decode().strip())
                    if reply is not None:
                        conn.sendall(reply + b"\n")

    def _message(self, message: str) -> bytes | None:
        with self._lock:
            self.received.append(message)
            replies = [
                r for u in message.split(";") if u.strip() and (r := self._unit(u)) is not None
            ]
        if not replies:
            return None
        if len(replies) == 1 and isinstance(replies[0], bytes):
            return replies[0]
        return ";".join(r if isinstance(r, str) else r.decode("latin-1") for r in replies).encode()
