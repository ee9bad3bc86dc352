"""Checked reading of one YAML mapping: typed fields, units, and `file:line: field` errors.

Shared by the recipe, station and judge-section loaders so that every message has one form:
`recipes/limiter.yaml:14: sweep.stop must be at most 60 V (got 80 V)`.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field
from typing import Any

from sequencer.model.errors import RecipeError
from sequencer.recipe.units import UnitProblem, parse_quantity
from sequencer.recipe.yamlsource import Source

# Names, lots and reasons are short; a longer text is a mistake (or an attack on every record
# and screen the text is copied into).
MAX_TEXT = 500


@dataclass
class Fields:
    """A mapping at `path` in `source`; hands out checked fields and refuses unknown ones."""

    source: Source
    path: str
    data: dict[str, Any]
    used: set[str] = field(default_factory=set)

    @classmethod
    def at(cls, source: Source, path: str, value: Any) -> Fields:
        if not isinstance(value, dict):
            raise source.error(path, f"must be a mapping of settings (got {show(value)})")
        return cls(source, path, value)

    def where(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def raw(self, key: str, default: Any = ..., *, required: bool = True) -> Any:
        self.used.add(key)
        if key in self.data:
            return self.data[key]
        if default is not ...:
            return default
        for written in self.data:  # 'complance: 5 mA' is a misspelling, not a missing key
            if written not in self.used and close_to(written, [key]):
                raise self.unknown(written, [key])
        raise self.source.error(self.path or key, f"needs '{key}'" if self.path else "is missing")

    def quantity(self, key: str, kind: str, default: Any = ...) -> float:
        value = self.raw(key, default)
        if isinstance(value, float) and value is default:
            return value
        try:
            return parse_quantity(value, kind)
        except UnitProblem as exc:
            raise self.source.error(self.where(key), str(exc)) from None

    def optional_quantity(self, key: str, kind: str) -> float | None:
        """A quantity that may be left out (None), e.g. a setting that switches a figure on."""
        self.used.add(key)
        return self.quantity(key, kind) if key in self.data else None

    def number(self, key: str, default: Any = ..., *, integer: bool = False) -> float:
        value = self.raw(key, default)
        ok = isinstance(value, int) if integer else isinstance(value, int | float)
        if isinstance(value, bool) or not ok:
            kind = "a whole number" if integer else "a plain number"
            raise self.source.error(self.where(key), f"must be {kind} (got {show(value)})")
        if not math.isfinite(value):
            raise self.source.error(self.where(key), f"must be a finite number (got {value!r})")
        return value

    def text(self, key: str, default: Any = ..., *, longest: int = MAX_TEXT) -> str:
        value = self.raw(key, default)
        if not isinstance(value, str | int | float) or isinstance(value, bool):
            raise self.source.error(self.where(key), f"must be text (got {show(value)})")
        self.check(len(str(value)) <= longest, key, f"is longer than {longest} characters")
        return str(value)

    def choice(self, key: str, options: tuple[str, ...], default: str) -> str:
        value = self.text(key, default)
        self.check(value in options, key, f"must be one of {', '.join(options)} (got {value!r})")
        return value

    def check(self, condition: bool, key: str, problem: str) -> None:
        if not condition:
            raise self.source.error(self.where(key), problem)

    def finish(self) -> None:
        for key in self.data:
            if key not in self.used:
                raise self.unknown(key, sorted(self.used))

    def unknown(self, key: str, known: list[str]) -> RecipeError:
        """An unknown key, at its own line, with the nearest known one."""
        near = close_to(key, known)
        hint = f"did you mean '{near[0]}'?" if near else f"known here: {', '.join(known)}"
        return self.source.error(self.where(key), f"is not a known setting; {hint}")


def close_to(word: str, known: list[str]) -> list[str]:
    """Known keys a misspelt or mis-cased key was probably meant to be."""
    by_case = [k for k in known if k.lower() == str(word).lower()]
    return by_case or difflib.get_close_matches(str(word), known, n=1, cutoff=0.75)


def show(value: Any, longest: int = 60) -> str:
    """A value as a message quotes it: never a whole file (a station path naming some other
    file would otherwise echo it into the screen and every log)."""
    text = repr(value) if not isinstance(value, dict | list) else type(value).__name__
    return text if len(text) <= longest else text[: longest - 1] + "…"


def positive(fields: Fields, key: str, kind: str, default: Any = ...) -> float:
    value = fields.quantity(key, kind, default)
    fields.check(value > 0, key, f"must be positive (got {value})")
    return value
