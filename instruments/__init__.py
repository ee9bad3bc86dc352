"""Talking to real instruments: transports, SCPI helpers, dialects and the SMU driver.

`connect()` is the front door: it opens a resource (or starts the embedded simulator for "sim"),
asks the dialect's identification (*IDN?) at once (a refused connection only shows on the
first write) and hands back a
`Connection` holding the `ScpiSmu`.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import TextIO

from instruments.dialect import Dialect, load_dialect
from instruments.embedded import EmbeddedSimulator
from instruments.errors import (
    DialectError,
    InstrumentDisconnected,
    InstrumentError,
    InstrumentTimeout,
    ReplyError,
    ScpiError,
)
from instruments.loopback import SpyTransport
from instruments.protocol import TERMINATORS, Transport
from instruments.smu import NOT_IDENTIFIED, Reading, ScpiSmu

logging.getLogger(__name__).addHandler(logging.NullHandler())
log = logging.getLogger(__name__)

SIM_RESOURCE = "sim"


class Connection:
    """An open instrument: `.smu`, `.resource` (the real resource string, also for "sim"),
    `.identity`. Closing it puts the SMU in its safe state first, then stops an embedded
    simulator."""

    def __init__(
        self,
        smu: ScpiSmu,
        resource: str,
        *,
        timeout_s: float,
        spy_log: TextIO | None,
        simulator: EmbeddedSimulator | None,
    ) -> None:
        self.smu = smu
        self.resource = resource
        self.identity = smu.identity
        self._timeout_s = timeout_s
        self._spy_log = spy_log
        self._simulator = simulator
        self.link: _Link | None = None  # the station's link settings, to reopen the same way
        self.closed = False

    def __enter__(self) -> Connection:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    def reconnect(self) -> ScpiSmu:
        """Open the resource again (for instance to switch the output off after a lost link).

        Replaces and returns `.smu`; the old one is closed. Refuses an instrument whose *IDN?
        differs from the original: commands meant for one instrument must not reach another.
        """
        if self.closed:
            raise InstrumentError(self.resource, None, "the connection is closed", hint="connect")
        return self._reopen()

    def _reopen(self) -> ScpiSmu:
        self.smu.close()
        transport = open_transport(
            self.resource, self.smu.dialect, self._timeout_s, self._spy_log, self.link
        )
        smu = ScpiSmu(transport, self.smu.dialect)
        try:
            identity = smu.identify()
        except BaseException:
            smu.close()
            raise
        if identity != self.identity and identity != NOT_IDENTIFIED:
            smu.close()
            detail = f"reconnected to {identity!r}, not the original {self.identity!r}"
            raise InstrumentError(self.resource, None, detail, hint="check the cabling")
        smu.channels_used = set(self.smu.channels_used)  # a mainframe: switch every one off
        smu.channel = self.smu.channel
        self.smu = smu
        return smu

    def close(self) -> None:
        """Safe state (output off, 0 V; never raises), close the link, stop the simulator.

        If the safe state cannot be sent (the instrument dropped the link), the resource is
        opened once more, only to send it: an output must not stay on because a socket broke.
        """
        if self.closed:
            return
        self.closed = True
        try:
            if not self.smu.safe_state() and not self._safe_state_on_new_link():
                log.warning("%s: closed without confirming the output is off", self.resource)
            self.smu.close()
        finally:
            if self._simulator is not None:
                self._simulator.stop()

    def _safe_state_on_new_link(self) -> bool:
        try:
            smu = self._reopen()
        except Exception as exc:  # closing must not raise; the warning says what is at stake
            log.warning("%s: could not reconnect to switch the output off: %s", self.resource, exc)
            return False
        return smu.safe_state()


def connect(
    resource: str,
    *,
    dialect: str | Path = "scpi1999",
    timeout_s: float = 2.0,
    spy_log: TextIO | None = None,
    sim_options: Mapping[str, object] | None = None,
    channels: tuple[int, ...] = (1,),
    visa_library: str = "@py",
    terminators: tuple[str | None, str | None] = (None, None),
    serial: Mapping[str, object] | None = None,
) -> Connection:
    """Open `resource` (a VISA resource string, or "sim" for the embedded simulator).
    `channels`: the tray channels wired to it; on a mainframe (a dialect naming {channel} in
    its commands) each is one source channel, and every one is switched off at each ending.
    `visa_library`, `terminators` (read, write: LF, CR or CRLF; None: the dialect's) and
    `serial` (line settings of an ASRL resource) are the station's link settings."""
    chosen = load_dialect(dialect)  # a bad dialect fails before anything is started or opened
    if sim_options and resource != SIM_RESOURCE:
        detail = f"simulator options were given for the resource {resource!r}"
        raise InstrumentError(resource, None, detail, hint=f"use them with {SIM_RESOURCE!r} only")
    simulator = EmbeddedSimulator() if resource == SIM_RESOURCE else None
    try:
        real = simulator.start(sim_options) if simulator is not None else resource
        # the embedded simulator is reached its own way (TCP, LF, no echo), whatever the
        # station says of the real instrument's link
        link = _Link() if simulator is not None else _Link(visa_library, terminators, serial)
        smu = ScpiSmu(open_transport(real, chosen, timeout_s, spy_log, link), chosen)
        if chosen.addresses_channels:
            smu.channels_used = set(channels) | {1}
        try:
            smu.identify()
        except BaseException:
            smu.close()
            raise
    except BaseException:
        if simulator is not None:
            simulator.stop()
        raise
    conn = Connection(smu, real, timeout_s=timeout_s, spy_log=spy_log, simulator=simulator)
    conn.link = link
    return conn


@dataclass(frozen=True)
class _Link:
    visa_library: str = "@py"
    terminators: tuple[str | None, str | None] = (None, None)
    serial: Mapping[str, object] | None = None


def open_transport(
    resource: str,
    dialect: Dialect,
    timeout_s: float = 2.0,
    spy_log: TextIO | None = None,
    link: _Link | None = None,
) -> Transport:
    """The link as the dialect has it: its terminators, its identification query asked first
    (none where the dialect has none: then only a refused connection is caught here)."""
    from instruments.transport import open_visa  # start-up speed: pyvisa loads when one is opened

    link = link or _Link()
    names = (given or own for given, own in zip(link.terminators, dialect.terminators, strict=True))
    read, write = (TERMINATORS[name] for name in names)
    transport: Transport = open_visa(
        resource,
        timeout_s=timeout_s,
        probe=dialect.identify,
        read_termination=read,
        write_termination=write,
        visa_library=link.visa_library,
        serial=link.serial,
    )
    return SpyTransport(transport, spy_log) if spy_log is not None else transport


__all__ = [
    "SIM_RESOURCE",
    "Connection",
    "Dialect",
    "DialectError",
    "EmbeddedSimulator",
    "InstrumentDisconnected",
    "InstrumentError",
    "InstrumentTimeout",
    "Reading",
    "ReplyError",
    "ScpiError",
    "ScpiSmu",
    "connect",
    "load_dialect",
    "open_transport",
]
