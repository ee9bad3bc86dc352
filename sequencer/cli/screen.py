"""The screen a command writes to (a terminal, a pipe, a file): a write that fails never ends a
run.

After SIGHUP the terminal is gone and every write to it fails (EIO); the reader of a pipe may
go away (EPIPE: `ccbench run ... | head -1`); a log file's disk may fill up. The instrument and
the run folder matter, the screen does not: the first failed write is remembered (`lost`, for
the run record), the stream's file descriptor is pointed at /dev/null so that nothing later
fails on it again (rich's refresh thread, the interpreter's own flush at exit, which would
otherwise end the process with code 120), and the rest of the output goes nowhere.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import os
from typing import TextIO


class Screen:
    """A text stream for rich's Console that never raises on write or flush."""

    def __init__(self, stream: TextIO | None, name: str = "stdout") -> None:
        self.stream, self.name = stream, name
        self.lost = ""  # why and when the screen went away; "" while it works

    def write(self, text: str) -> int:
        if self.stream is not None and not self.lost:
            try:
                self.stream.write(text)
                self.stream.flush()  # now, so that a failure is seen here and not at exit
            except OSError as exc:
                self._lose(exc)
        return len(text)

    def flush(self) -> None:
        if self.stream is not None and not self.lost:
            try:
                self.stream.flush()
            except OSError as exc:
                self._lose(exc)

    def isatty(self) -> bool:
        try:
            return self.stream is not None and not self.lost and self.stream.isatty()
        except (OSError, ValueError):
            return False

    def fileno(self) -> int:
        if self.stream is None:
            raise OSError(f"{self.name} is closed")
        return self.stream.fileno()

    @property
    def encoding(self) -> str:
        return getattr(self.stream, "encoding", None) or "utf-8"

    def _lose(self, exc: OSError) -> None:
        at = dt.datetime.now(dt.UTC).strftime("%H:%M:%S UTC")
        self.lost = f"the screen ({self.name}) went away at {at} ({exc.strerror or exc})"
        silence(self.stream)


def silence(stream: TextIO | None) -> None:
    """Point the stream's file descriptor at /dev/null: what it still holds, and whatever is
    written to it later, goes nowhere instead of failing."""
    with contextlib.suppress(OSError, ValueError, AttributeError):
        fd = stream.fileno()  # type: ignore[union-attr]
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, fd)
        os.close(null)
