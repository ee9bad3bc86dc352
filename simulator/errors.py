"""The simulator's exceptions, its SCPI error queue and the event-status bits each error sets.

The code-to-text table is data (data/scpi_errors.yaml), so the texts live in one place and a test
can compare them with the standard's list.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass
from functools import cache
from importlib import resources

import yaml

QUEUE_CAPACITY = 10
OVERFLOW = -350

# IEEE 488.2 Standard Event Status Register bits (weights).
ESR_OPC, ESR_QYE, ESR_DDE, ESR_EXE, ESR_CME = 1, 4, 8, 16, 32


class SimulatorError(Exception):
    """Base of every error the simulator raises on purpose; pickles with its fields."""

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message

    def __reduce__(self):
        return (_rebuild, (type(self), self.__dict__))

    def __str__(self) -> str:
        return self.message


def _rebuild(cls: type[SimulatorError], state: dict) -> SimulatorError:
    err = cls.__new__(cls)
    Exception.__init__(err, state.get("message", ""))
    err.__dict__.update(state)
    return err


class OptionError(SimulatorError, ValueError):
    """A simulator option (command line or API) is invalid: says which and what was expected."""

    def __init__(self, option: str, problem: str) -> None:
        super().__init__(f"simulator option {option}: {problem}")
        self.option, self.problem = option, problem


class ModelError(SimulatorError, ValueError):
    """Device-model parameters that make no physical sense (e.g. a preset file gone wrong)."""


class ScpiError(SimulatorError, ValueError):
    """One SCPI error event: raised by the parser or a command, queued by the session."""

    def __init__(self, code: int, detail: str = "") -> None:
        super().__init__(format_entry(code, detail))
        self.code, self.detail = code, detail


@cache
def error_texts() -> dict[int, str]:
    """The code -> standard text table, read once from the package data."""
    text = resources.files(__package__).joinpath("data/scpi_errors.yaml").read_text("utf-8")
    return {int(code): str(msg) for code, msg in yaml.safe_load(text).items()}


def format_entry(code: int, detail: str = "") -> str:
    """`-222,"Data out of range;VOLT 500"`: quotes inside the text are doubled (IEEE 488.2)."""
    text = error_texts().get(code, "Device-specific error")
    if detail:
        text = f"{text};{detail}"
    return f'{code},"{text[:255].replace(chr(34), chr(34) * 2)}"'


def esr_bit(code: int) -> int:
    """The event-status bit an error of this code sets (SCPI-1999 Vol 2 21.8 error classes)."""
    if -199 <= code <= -100:
        return ESR_CME
    if -299 <= code <= -200:
        return ESR_EXE
    if -399 <= code <= -300 or code > 0:
        return ESR_DDE
    if -499 <= code <= -400:
        return ESR_QYE
    return 0


@dataclass(frozen=True)
class Entry:
    code: int
    detail: str = ""

    def __str__(self) -> str:
        return format_entry(self.code, self.detail)


class ErrorQueue:
    """FIFO of error events, capacity 10. When full, the newest entry becomes -350 (SCPI-1999)."""

    def __init__(self, capacity: int = QUEUE_CAPACITY) -> None:
        self.capacity = capacity
        self._entries: deque[Entry] = deque()

    def push(self, code: int, detail: str = "") -> None:
        if len(self._entries) < self.capacity:
            self._entries.append(Entry(code, detail))
        elif self._entries[-1].code != OVERFLOW:
            self._entries[-1] = Entry(OVERFLOW)

    def pop(self) -> Entry:
        return self._entries.popleft() if self._entries else Entry(0)

    def codes(self) -> list[int]:
        return [entry.code for entry in self._entries]

    def clear(self) -> None:
        self._entries.clear()

    def __len__(self) -> int:
        return len(self._entries)
