"""The instrument layer's exceptions: one base, each concrete error also a matching builtin.

Every error keeps structured fields (which resource, which SCPI command, what happened, what to do)
and builds its one-line message from them. All of them pickle, because a multi-site run carries
them across threads and processes.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

# An instrument's reply can be any length (a runaway one was 20 MB): what an error quotes of it
# goes to the screen, the journal, the CSV and the database, so a message is cut to this.
LONGEST_DETAIL = 400


def in_part(text: str, longest: int = 80) -> str:
    """`text` quoted as a message shows a reply: whole when short, else its start and its size."""
    if len(text) <= longest:
        return repr(text)
    return f"{text[:longest]!r}… ({len(text):,} characters in all)"


class InstrumentError(Exception):
    """Base of every error the instrument layer raises on purpose.

    `resource` is the VISA resource string (or a dialect file), `command` the SCPI text being
    sent (None when not tied to one command), `detail` what happened and `hint` what to do.
    """

    default_hint = "check the instrument, its cable and the resource string"

    def __init__(
        self, resource: str, command: str | None, detail: str, *, hint: str | None = None
    ) -> None:
        self.resource = resource
        self.command = command
        self.detail = _cut(detail)
        self.hint = self.default_hint if hint is None else hint
        self.message = self._build_message()
        super().__init__(self.message)

    def _build_message(self) -> str:
        where = f"instrument {self.resource}" if self.resource else "instrument"
        if self.command:
            where += f", command {self.command!r}"
        text = f"{self.detail} ({where})"
        return f"{text}: {self.hint}" if self.hint else text

    def __str__(self) -> str:
        return self.message

    def __reduce__(self) -> tuple[Any, ...]:
        # Subclasses have other signatures, some inherit OSError's reduce: rebuild from state.
        return (_rebuild, (type(self), self.__dict__))


def _cut(detail: str) -> str:
    if len(detail) <= LONGEST_DETAIL:
        return detail
    return f"{detail[:LONGEST_DETAIL]}… (cut; {len(detail):,} characters in all)"


def _rebuild(cls: type[InstrumentError], state: dict[str, Any]) -> InstrumentError:
    err = cls.__new__(cls)
    Exception.__init__(err, state.get("message", ""))
    err.__dict__.update(state)
    return err


class InstrumentTimeout(InstrumentError, TimeoutError):
    """No complete reply within the timeout; the connection itself still looked alive."""

    default_hint = (
        "the instrument is slow or did not understand the query; check the dialect's text for "
        "this instrument, or raise the timeout"
    )


class InstrumentDisconnected(InstrumentError, ConnectionError):
    """The connection is gone (refused, reset, closed by the instrument, or closed by us)."""

    default_hint = "check the instrument is on and listening at that address, then reconnect"


class ReplyError(InstrumentError, ValueError):
    """A reply that cannot be parsed: wrong shape, not a number, a malformed block."""

    default_hint = (
        "the reply does not have the form the dialect expects; check the dialect file against "
        "the instrument's manual (or the instrument sent garbage: look at the spy log)"
    )


class ScpiError(InstrumentError):
    """Entries of the instrument's error queue (SYSTem:ERRor?), the first one in `code`/`text`."""

    def __init__(
        self,
        resource: str,
        command: str | None,
        code: int,
        text: str,
        *,
        entries: Sequence[tuple[int, str]] = (),
        hint: str | None = None,
    ) -> None:
        self.code = code
        self.text = text
        self.entries = tuple(entries) or ((code, text),)
        listed = "; ".join(f'{c},"{t}"' for c, t in self.entries)
        count = len(self.entries)
        detail = f"instrument reported {count} error{'s' if count > 1 else ''}: {listed}"
        super().__init__(resource, command, detail, hint=hint or scpi_error_hint(code))


class DialectError(InstrumentError, ValueError):
    """A dialect file is wrong, or lacks an operation the driver was asked to do."""

    def __init__(
        self,
        file: str | Path,
        key: str | None,
        line: int | None,
        detail: str,
        *,
        hint: str | None = None,
    ) -> None:
        self.file = str(file)
        self.key = key
        self.line = line
        super().__init__(
            self.file,
            key,
            detail,
            hint=hint or "fix the dialect file (keys, placeholders as in dialects/scpi1999.yaml)",
        )

    def _build_message(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        what = f"{where}: key {self.key!r}: " if self.key else f"{where}: "
        return f"{what}{self.detail}: {self.hint}"


# What to do about an error-queue entry, by class of code (SCPI-1999 Vol 2 21.8 number ranges).
_SCPI_HINTS: tuple[tuple[int, int, str], ...] = (
    (-199, -100, "the instrument did not understand a command: check the dialect's SCPI text"),
    (-299, -200, "the instrument refused a setting in its present state or range: check values"),
    (-399, -300, "the instrument reports a fault of its own: see its manual, then reset it"),
    (-499, -400, "driver and instrument are out of step: reconnect"),
)


def scpi_error_hint(code: int) -> str:
    """What to do about an error-queue entry with this code."""
    for low, high, hint in _SCPI_HINTS:
        if low <= code <= high:
            return hint
    return "see the instrument's manual for this code"


class SensorFault(InstrumentError, ValueError):
    """A temperature reading outside the range its dialect calls plausible: a sensor fault."""

    default_hint = (
        "the chamber's sensor reads off scale (open or shorted): check its wiring, then restart"
    )
