"""A pydantic ValidationError as the loader's one line: `file:line: path problem`.

The error's `loc` is the path of the value ("steps", 0, "sweep", "stop"); the Source knows the
line of every path. Union members are told apart by tags starting with "~" (format.types): they
are not keys of the file, so they leave the path. A rule on a whole section names the key it is
about in its context ("at"), so the line shown is that key's own.
"""

from __future__ import annotations

from functools import cache
from typing import Any

from pydantic import BaseModel, TypeAdapter, ValidationError

from sequencer.model.errors import RecipeError
from sequencer.recipe.fields import show
from sequencer.recipe.format.types import PROBLEM
from sequencer.recipe.yamlsource import Source

# Pydantic's own error types, in the loader's words ({got}: the value as written).
WORDS = {
    "int_type": "must be a whole number (got {got})",
    "int_from_float": "must be a whole number (got {got})",
    "float_type": "must be a plain number (got {got})",
    "finite_number": "must be a finite number (got {got})",
    "bool_type": "must be true or false (got {got})",
    "string_type": "must be text (got {got})",
    "list_type": "must be a list (got {got})",
    "tuple_type": "must be a list (got {got})",
    "dict_type": "must be a mapping of settings (got {got})",
    "model_type": "must be a mapping of settings (got {got})",
    "model_attributes_type": "must be a mapping of settings (got {got})",
    "too_short": "must have at least {min_length} item(s) (got {got})",
    "too_long": "must have at most {max_length} items (got {got})",
}


def validated(kind: Any, source: Source, value: Any, path: str = "") -> Any:
    """`value` (the whole file, or the section at `path`) validated by `kind`, a model or an
    annotated type."""
    try:
        if isinstance(kind, type) and issubclass(kind, BaseModel):
            return kind.model_validate(value)
        return _adapter(kind).validate_python(value)
    except ValidationError as exc:
        raise as_recipe_error(exc, source, path) from None


@cache
def _adapter(kind: Any) -> TypeAdapter[Any]:
    return TypeAdapter(kind)


def as_recipe_error(exc: ValidationError, source: Source, base: str = "") -> RecipeError:
    """The first error, in the order of the file's keys; a missing key gives way to an unknown
    key beside it, which is usually the same key misspelt."""
    errors = exc.errors()
    first = errors[0]
    if first["type"] == "missing":
        parent = first["loc"][:-1]
        for other in errors:
            if other["type"] == PROBLEM and tuple(other["loc"]) == tuple(parent):
                first = other
                break
    loc = [part for part in first["loc"] if not (isinstance(part, str) and part.startswith("~"))]
    ctx = first.get("ctx") or {}
    if first["type"] == "missing":
        key, parent_path = str(loc[-1]), dotted(base, loc[:-1])
        if parent_path:
            return source.error(parent_path, f"needs '{key}'")
        return source.error(key, "is missing")
    if "at" in ctx:
        loc = [*loc, *str(ctx["at"]).split(".")]
        loc = [int(p) if isinstance(p, str) and p.isascii() and p.isdigit() else p for p in loc]
    return source.error(dotted(base, loc), message(first))


def message(error: Any) -> str:
    ctx = error.get("ctx") or {}
    if error["type"] == PROBLEM:
        return str(ctx["problem"])
    words = WORDS.get(error["type"])
    if words is None:  # a pydantic check without words of ours: its own, plainly
        return f"is wrong: {error['msg']}"
    return words.format(got=show(error.get("input")), **ctx)


def dotted(base: str, loc: list[Any] | tuple[Any, ...]) -> str:
    """('steps', 0, 'sweep', 'stop') -> 'steps[0].sweep.stop' (below `base`)."""
    path = base
    for part in loc:
        if isinstance(part, int):
            path += f"[{part}]"
        else:
            path = f"{path}.{part}" if path else str(part)
    return path
