"""The temperature chamber driver: set point, readings, start and stop, as its dialect spells them.

It only does I/O through a Transport (the same layer as the SMU's), so a chamber on any VISA
resource works, and a test can drive it through an in-process responder. Every reading is checked
against the dialect's plausible range: an open sensor reads off scale and must never be taken as
a temperature. A set point is always read back, because a chamber that silently clamps or ignores
it would otherwise soak at the wrong temperature.
"""

from __future__ import annotations

import math

from instruments.chamber_dialect import ChamberDialect
from instruments.errors import InstrumentError, ReplyError, ScpiError, SensorFault
from instruments.protocol import Transport
from instruments.scpi import parse_bool, parse_error_entry, parse_number

# How far a read-back set point may differ from the one sent: the chamber may round it to its own
# display resolution (0.01 K is finer than any chamber control; common practice, no source).
SET_POINT_READBACK_K = 0.01


class TextChamber:
    """A chamber that speaks one line of text per command (see dialects/chamber_text.yaml)."""

    def __init__(self, transport: Transport, dialect: ChamberDialect) -> None:
        self.transport = transport
        self.dialect = dialect

    @property
    def resource(self) -> str:
        return self.transport.resource

    def identify(self) -> str:
        return self.transport.query(self.dialect.identify).strip()

    def set_point(self, celsius: float) -> float:
        """Send a set point and return it as read back; refused if the chamber kept another."""
        if not math.isfinite(celsius):
            raise ValueError(f"a set point must be a finite temperature (got {celsius!r})")
        command = self.dialect.render_set_point(celsius)
        self.transport.write(command)
        self.check_errors(command)
        kept = self.read_set_point()
        if abs(kept - celsius) > SET_POINT_READBACK_K:
            detail = f"set point {celsius:g} degC was sent but the chamber reads back {kept:g} degC"
            hint = "the chamber refused or clamped it: check its own limits and the dialect"
            raise InstrumentError(self.resource, command, detail, hint=hint)
        return kept

    def read_set_point(self) -> float:
        return self._number(self.dialect.set_point_query)

    def temperature(self) -> float:
        """The control (air) sensor, degC; SensorFault when it reads off scale."""
        return self._reading(self.dialect.read_temperature)

    def fixture_temperature(self) -> float | None:
        """The device-mount sensor, degC, or None when the dialect has none."""
        query = self.dialect.read_fixture
        return None if query is None else self._reading(query)

    def start(self) -> None:
        self._command(self.dialect.start)

    def stop(self) -> None:
        self._command(self.dialect.stop)

    def running(self) -> bool | None:
        query = self.dialect.running_query
        return None if query is None else self._bool(query)

    def door_open(self) -> bool | None:
        query = self.dialect.door_query
        return None if query is None else self._bool(query)

    def make_safe(self, celsius: float | None) -> str:
        """Leave the chamber safe: at `celsius` and running, or stopped when None. Read back.

        Returns the one line that says what it reads now (for the last line of a run)."""
        if celsius is None:
            self.stop()
            state = self.running()
            if state:
                detail = "the chamber was told to stop but still reports running"
                raise InstrumentError(self.resource, self.dialect.stop, detail)
            return f"chamber stopped, reads {self.temperature():.1f} degC"
        kept = self.set_point(celsius)
        self.start()
        return f"chamber set to {kept:g} degC (read back), reads {self.temperature():.1f} degC"

    def check_errors(self, command: str | None = None) -> None:
        """Raise the chamber's first queued error, if its dialect can ask for one."""
        query = self.dialect.next_error
        if query is None:
            return
        entry = self.transport.query(query)
        try:
            code, text = parse_error_entry(entry)
        except ReplyError as exc:
            raise ReplyError(self.resource, query, exc.detail) from exc
        if code != 0:
            raise ScpiError(self.resource, command, code, text)

    def _command(self, command: str) -> None:
        self.transport.write(command)
        self.check_errors(command)

    def _reading(self, query: str) -> float:
        value = self._number(query)
        low, high = self.dialect.valid_range_c
        if not low <= value <= high:
            detail = f"temperature reading {value:g} degC is outside {low:g}..{high:g} degC"
            raise SensorFault(self.resource, query, detail)
        return value

    def _number(self, query: str) -> float:
        reply = self.transport.query(query)
        try:
            return parse_number(reply)
        except ReplyError as exc:
            raise ReplyError(self.resource, query, exc.detail) from exc

    def _bool(self, query: str) -> bool:
        reply = self.transport.query(query)
        try:
            return parse_bool(reply)
        except ReplyError as exc:
            raise ReplyError(self.resource, query, exc.detail) from exc
