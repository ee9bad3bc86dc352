"""A chamber's dialect: the command text of each temperature operation, from a small YAML file.

Like the SMU's dialects (instruments/dialect.py), the file is checked once at load, so a wrong file
fails at start-up with file, line and key, never mid-run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from instruments.dialect import DIALECT_DIR, check_placeholders, read_mapping
from instruments.errors import DialectError
from instruments.scpi import format_number

PLACEHOLDERS: dict[str, frozenset[str]] = {"set_point": frozenset({"celsius"})}
REQUIRED = frozenset(
    {"name", "identify", "set_point", "set_point_query", "read_temperature", "start", "stop"}
    | {"valid_range_c"}
)
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
    data, lines = read_mapping(text, source)
    last_line = max(lines.values(), default=None)
    for key in data:
        if key not in _ALL_KEYS:
            detail = f"unknown key (known keys: {', '.join(_ALL_KEYS)})"
            raise DialectError(source, str(key), lines.get(str(key)), detail, hint=_HINT)
    for key in _ALL_KEYS:
        if key not in data:
            raise DialectError(source, key, last_line, "missing (write null if not supported)")
    values = {key: _value(key, data[key], lines.get(key), source) for key in _ALL_KEYS}
    return ChamberDialect(**values, source=str(source))


def _value(key: str, value: Any, line: int | None, source: str | Path) -> Any:
    if value is None:
        if key in REQUIRED:
            raise DialectError(source, key, line, "must not be null: the driver needs it")
        return None
    if key == "valid_range_c":
        return _range(value, line, source)
    if not isinstance(value, str) or not value.strip():
        raise DialectError(source, key, line, f"must be text (got {value!r})", hint=_HINT)
    if key in _TEXT_KEYS:
        check_placeholders(key, value, line, source, PLACEHOLDERS)
    return value


def _range(value: Any, line: int | None, source: str | Path) -> tuple[float, float]:
    ok = isinstance(value, list) and len(value) == 2
    ok = ok and all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
    if not ok or not all(math.isfinite(v) for v in value) or value[0] >= value[1]:
        detail = f"must be [lowest, highest] in degC, lowest below highest (got {value!r})"
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
