"""The simulated SMU on a pseudo-terminal: `ASRL/dev/pts/N::INSTR` through pyvisa-py + pyserial.

For the stations whose instruments hang on RS-232. The simulator holds the pty's master side and
serves the same SCPI as over TCP (same instrument, same faults), newline-terminated both ways;
the client opens the slave device like any serial port. The slave is put in raw mode (no echo,
no line editing) before anyone opens it, and the simulator keeps it open itself, so clients may
come and go. A `close` fault ends the port for good, like a pulled cable. Keep data small here:
pyvisa-py reads a serial port one byte at a time (SCPI.md s1.7, about 13 us a byte).
"""

from __future__ import annotations

import contextlib
import os
import pty
import select
import threading
import tty
from dataclasses import dataclass

from simulator.instrument import Instrument
from simulator.server import deliver
from simulator.session import Session

POLL_S = 0.02  # how often the serving thread looks for a stop request


@dataclass
class SerialHandle:
    """A served pty: `resource` is the VISA resource string to open with pyvisa."""

    path: str
    _master: int
    _slave: int
    _stop: threading.Event
    _thread: threading.Thread

    @property
    def resource(self) -> str:
        return f"ASRL{self.path}::INSTR"

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5)
        for fd in (self._master, self._slave):
            with contextlib.suppress(OSError):
                os.close(fd)

    def __enter__(self) -> SerialHandle:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def start_serial(instrument: Instrument) -> SerialHandle:
    """Serve `instrument` on a new pseudo-terminal in a background thread."""
    master, slave = pty.openpty()
    tty.setraw(slave)
    stop = threading.Event()
    thread = threading.Thread(
        target=_serve, args=(Session(instrument), master, stop), name="scpi-pty", daemon=True
    )
    thread.start()
    return SerialHandle(os.ttyname(slave), master, slave, stop, thread)


def _serve(session: Session, master: int, stop: threading.Event) -> None:
    pending = bytearray()

    def send(data: bytes) -> None:
        view = memoryview(data)
        while view:  # a pty takes a few kilobytes at a time
            view = view[os.write(master, view) :]

    try:
        while not stop.is_set():
            if not select.select([master], [], [], POLL_S)[0]:
                continue
            pending += os.read(master, 4096)
            while (end := pending.find(b"\n")) >= 0:
                message = pending[:end].decode("latin-1")
                del pending[: end + 1]
                if not deliver(session.respond(message), send, stop):
                    return  # a close fault: the port goes away
    except OSError:
        pass  # the pty was closed under us (stop), nothing left to serve
    finally:
        with contextlib.suppress(OSError):
            os.close(master)
