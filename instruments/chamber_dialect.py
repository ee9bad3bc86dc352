"""A chamber's dialect: the command text of each temperature operation, from a small YAML file.

Like the SMU's dialects (instruments/dialect.py), the file is checked once at load, so a wrong file
fails at start-up with file, line and key, never mid-run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from instruments.dialect import DIALECT_DIR, check_placeholders, format_error, read_mapping
from instruments.errors import DialectError
from instruments.scpi import format_number

PLACEHOLDERS: dict[str, frozenset[str]] = {"set_point": frozenset({"celsius"})}
_HINT = "fix the chamber dialect file (keys, placeholders as in dialects/chamber_text.yaml)"


@dataclass(frozen=True)
class ChamberDialect:
    """One chamber's command text per operation; None where it has no such command."""

    name: str
    description: str | None
    identify: str
    set_point: str
    set_point_query: str
    read_temperature: str
    read_fixture: str | None
    start: str
    stop: str
    running_query: str | None
    door_query: str | None
    next_error: str | None
    valid_range_c: tuple[float, float]
    source: str = "<built in>"

    def render_set_point(self, celsius: float) -> str:
        return self.set_point.format(celsius=format_number(float(celsius)))


_ALL_KEYS = tuple(f.name for f in fields(ChamberDialect) if f.name != "source")
_TEXT_KEYS = frozenset(_ALL_KEYS) - {"name", "description", "valid_range_c"}


def parse_chamber_dialect(text: str, source: str | Path = "<text>") -> ChamberDialect:
    """Validate chamber dialect YAML text; errors name `source`, key and line."""
    # Start-up speed: the format builds a pydantic model at import; only loading a file needs it.
    from instruments.dialectformat import ChamberDialect as Format
    from instruments.dialectformat import first_problem

    data, lines = read_mapping(text, source)
    problem = first_problem(Format, data)
    if problem is not None:
        raise format_error(problem, _ALL_KEYS, lines, source, VALUE_WORDS, hint=_HINT)
    values = {key: _value(key, data[key], lines.get(key), source) for key in _ALL_KEYS}
    return ChamberDialect(**values, source=str(source))


RANGE_WORDS = "must be [lowest, highest] in degC, lowest below highest (got {value!r})"
VALUE_WORDS = {"valid_range_c": RANGE_WORDS}


def _value(key: str, value: Any, line: int | None, source: str | Path) -> Any:
    """A value the format has checked, with its placeholders and range order checked."""
    if value is None:
        return None
    if key == "valid_range_c":
        return _range(value, line, source)
    if key in _TEXT_KEYS:
        check_placeholders(key, value, line, source, PLACEHOLDERS)
    return value


def _range(value: Any, line: int | None, source: str | Path) -> tuple[float, float]:
    if not all(math.isfinite(v) for v in value) or value[0] >= value[1]:
        detail = RANGE_WORDS.format(value=value)
        raise DialectError(source, "valid_range_c", line, detail, hint=_HINT)
    return float(value[0]), float(value[1])


def load_chamber_dialect(name_or_path: str | Path) -> ChamberDialect:
    """The packaged chamber dialect of that name ('chamber_text'), or the file at that path."""
    packaged = DIALECT_DIR / f"{name_or_path}.yaml"
    is_name = isinstance(name_or_path, str) and name_or_path.isidentifier()
    path = packaged if is_name and packaged.exists() else Path(name_or_path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise DialectError(path, None, None, f"cannot read: {exc.strerror or exc}") from exc
    return parse_chamber_dialect(text, path)
