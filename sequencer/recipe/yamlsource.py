"""The one module that reads YAML: text -> plain values plus the line of every field.

Validation messages must say `file:line: field ...`, so the loader keeps, beside the values,
a map from each dotted field path ("steps[0].sweep.stop") to its 1-based line.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from sequencer.model.errors import RecipeError
from sequencer.recipe.units import UnitProblem, plain_number

_PLAIN_INTEGER = re.compile(r"[+-]?(?:0|[1-9][0-9]*)")


@dataclass
class Source:
    """A parsed YAML document: its values, its file name, and where each field stands."""

    file: str
    data: Any
    lines: dict[str, int] = field(default_factory=dict)

    def line(self, path: str) -> int | None:
        """The line of a field, or of its nearest enclosing field that has one."""
        while path:
            if path in self.lines:
                return self.lines[path]
            path = _parent(path)
        return self.lines.get("")

    def error(self, path: str, problem: str) -> RecipeError:
        return RecipeError(self.file, self.line(path), path, problem)


def _parent(path: str) -> str:
    cut = max(path.rfind("."), path.rfind("["))
    return path[:cut] if cut > 0 else ""


def load_yaml(path: Path) -> Source:
    """Read a YAML file; a missing file or bad YAML becomes a RecipeError naming file and line."""
    name = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RecipeError(name, None, "", "file not found; check the path") from None
    except OSError as exc:
        raise RecipeError(name, None, "", f"cannot be read ({exc.strerror})") from None
    return parse_yaml(text, name)


def parse_yaml(text: str, name: str) -> Source:
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark else None
        problem = getattr(exc, "problem", None) or str(exc)
        raise RecipeError(name, line, "", f"is not valid YAML: {problem}") from None
    source = Source(name, None)
    if node is None:
        raise RecipeError(name, 1, "", "is empty; expected a mapping of settings")
    source.data = _convert(node, "", source)
    return source


def _convert(node: yaml.Node, path: str, source: Source) -> Any:
    source.lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        out: dict[str, Any] = {}
        for key_node, value_node in node.value:
            key = str(yaml.SafeLoader(" ").construct_object(key_node))
            child = f"{path}.{key}" if path else key
            if key in out:
                raise RecipeError(
                    source.file, key_node.start_mark.line + 1, child, "is given twice"
                )
            source.lines[child] = key_node.start_mark.line + 1
            out[key] = _convert(value_node, child, source)
        return out
    if isinstance(node, yaml.SequenceNode):
        return [_convert(item, f"{path}[{i}]", source) for i, item in enumerate(node.value)]
    value = yaml.SafeLoader(" ").construct_object(node)
    if isinstance(value, int | float) and not isinstance(value, bool):
        _check_plain_number(node, value, path, source)
    return value


def _check_plain_number(node: yaml.Node, value: float, path: str, source: Source) -> None:
    """YAML 1.1 reads more than decimal numbers as numbers: '1_000', '0x1F', '017' (octal 15),
    '1:30' (90), '.inf', '.nan'. Only plain decimal numbers pass; the rest would be silently
    something else than written, a number or (quoted) text."""
    text = str(node.value)
    try:
        plain = _PLAIN_INTEGER.fullmatch(text) if isinstance(value, int) else plain_number(text)
    except UnitProblem:
        plain = None
    if plain is None:
        problem = (
            f"reads as the number {value!r} in YAML (written {text!r}); write a plain finite "
            "decimal number, or put it in quotes if it is text"
        )
        raise RecipeError(source.file, node.start_mark.line + 1, path, problem)
