"""The sequencer's exceptions: one base, each concrete error also a matching builtin.

Every error carries structured fields and builds its message from them, so that the CLI can show
one clear line and a multi-process run can pickle it across a process boundary.
"""

from __future__ import annotations


class CcbenchError(Exception):
    """Base of every error the sequencer raises on purpose. `exit_code` is what the CLI returns."""

    exit_code = 1

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message

    def __reduce__(self):  # keep pickling working for subclasses with other signatures
        return (_rebuild, (type(self), self.__dict__))

    def __str__(self) -> str:
        return self.message


def _rebuild(cls: type[CcbenchError], state: dict) -> CcbenchError:
    err = cls.__new__(cls)
    Exception.__init__(err, state.get("message", ""))
    err.__dict__.update(state)
    return err


def one_line(text: str) -> str:
    """`text` with control characters written as escapes (a newline as \\n)."""
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


class RecipeError(CcbenchError, ValueError):
    """A recipe or station file is wrong: names the file, line and field, and what was expected."""

    exit_code = 2

    def __init__(self, file: str, line: int | None, field: str, problem: str) -> None:
        where = f"{file}:{line}" if line else file
        # A key or value from the file may hold a line break: the message stays one line.
        field, problem = one_line(field), one_line(problem)
        super().__init__(f"{where}: {field} {problem}" if field else f"{where}: {problem}")
        self.file, self.line, self.field, self.problem = file, line, field, problem


class SafetyError(CcbenchError, RuntimeError):
    """A planned or actual level would exceed a limit; nothing beyond it was sent."""

    exit_code = 3


class RunError(CcbenchError, RuntimeError):
    """A run could not go on (instrument lost, run folder unusable...)."""

    exit_code = 4


class StoreError(CcbenchError, OSError):
    """Results could not be written or read; what was written before is kept."""

    exit_code = 5


class StoreReadError(StoreError):
    """Stored results that cannot be read (an empty, damaged or foreign file): bad input to the
    command that reads them, not a failed write, so the exit code is 2, not 5."""

    exit_code = 2


class CurveFileError(CcbenchError, ValueError):
    """A curve file (CSV) is unreadable or malformed: names the file and line."""

    exit_code = 2

    def __init__(self, file: str, line: int | None, problem: str) -> None:
        where = f"{file}:{line}" if line else file
        super().__init__(f"{where}: {problem}")
        self.file, self.line, self.problem = file, line, problem


class StudyError(CcbenchError, ValueError):
    """A measurement study cannot be computed from the data given (too few parts or repeats,
    unbalanced cells...): says what is missing and what to measure."""

    exit_code = 2
