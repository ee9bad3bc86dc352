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

# Bounds far above any real recipe or station (a few kB, a few hundred values, 6 levels deep),
# so a hostile or broken file is refused at once instead of hanging or filling memory: YAML
# aliases can make a 1 kB file expand to a billion values.
MAX_BYTES = 1024 * 1024
MAX_VALUES = 20_000
MAX_DEPTH = 40


@dataclass
class Source:
    """A parsed YAML document: its values, its file name, and where each field stands."""

    file: str
    data: Any
    lines: dict[str, int] = field(default_factory=dict)
    text: str = ""  # exactly the text that was parsed: what a run records and hashes
    values: int = 0  # values converted so far, aliases expanded
    loader: Any = field(default=None, repr=False)  # one scalar constructor for the whole file

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
        with path.open("rb") as file:  # read once: what is parsed is what is recorded
            raw = file.read(MAX_BYTES + 1)
    except FileNotFoundError:
        raise RecipeError(name, None, "", "file not found; check the path") from None
    except IsADirectoryError:
        raise RecipeError(name, None, "", "is a folder; name a YAML file") from None
    except OSError as exc:
        raise RecipeError(name, None, "", f"cannot be read ({exc.strerror})") from None
    if len(raw) > MAX_BYTES:
        problem = f"is larger than {MAX_BYTES // 1024} kB; a recipe or station is a few kB"
        raise RecipeError(name, None, "", problem)
    return parse_yaml(_decode(raw, name), name)


def _decode(raw: bytes, name: str) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        problem = f"is not UTF-8 text (byte 0x{raw[exc.start]:02x}); save the file as UTF-8"
        raise RecipeError(name, line, "", problem) from None


def parse_yaml(text: str, name: str) -> Source:
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.reader.ReaderError as exc:  # a control character: no mark, a two-line text
        line = text[: exc.position].count("\n") + 1
        code = exc.character if isinstance(exc.character, int) else ord(str(exc.character)[:1])
        problem = f"holds the control character U+{code:04X}, which YAML does not allow"
        raise RecipeError(name, line, "", f"{problem}; remove it") from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark else None
        problem = " ".join(str(getattr(exc, "problem", None) or exc).split())  # one line
        raise RecipeError(name, line, "", f"is not valid YAML: {problem}") from None
    except RecursionError:
        raise RecipeError(name, None, "", f"nests deeper than {MAX_DEPTH} levels") from None
    source = Source(name, None, text=text, loader=yaml.SafeLoader(""))
    if node is None:
        raise RecipeError(name, 1, "", "is empty; expected a mapping of settings")
    source.data = _convert(node, "", source)
    return source


def _bounded(node: yaml.Node, path: str, source: Source, depth: int) -> None:
    source.values += 1
    line = node.start_mark.line + 1
    if source.values > MAX_VALUES:
        problem = f"holds more than {MAX_VALUES} values (aliases counted as often as used)"
        raise RecipeError(source.file, line, path, problem)
    if depth > MAX_DEPTH:
        raise RecipeError(source.file, line, path, f"nests deeper than {MAX_DEPTH} levels")


def _construct(node: yaml.Node, path: str, source: Source) -> Any:
    try:
        return source.loader.construct_object(node)
    except yaml.YAMLError:
        problem = f"has the YAML tag {node.tag}, which ccbench does not read; remove it"
        raise RecipeError(source.file, node.start_mark.line + 1, path, problem) from None


def _convert(node: yaml.Node, path: str, source: Source, depth: int = 0) -> Any:
    _bounded(node, path, source, depth)
    source.lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        out: dict[str, Any] = {}
        for key_node, value_node in node.value:
            key = str(_construct(key_node, path, source))
            child = f"{path}.{key}" if path else key
            if key in out:
                raise RecipeError(
                    source.file, key_node.start_mark.line + 1, child, "is given twice"
                )
            source.lines[child] = key_node.start_mark.line + 1
            out[key] = _convert(value_node, child, source, depth + 1)
        return out
    if isinstance(node, yaml.SequenceNode):
        items = enumerate(node.value)
        return [_convert(item, f"{path}[{i}]", source, depth + 1) for i, item in items]
    value = _construct(node, path, source)
    if isinstance(value, bool) and str(node.value).lower() not in ("true", "false"):
        problem = (
            f"reads as {str(value).lower()} in YAML (written {node.value!r}); write true or "
            "false, or put it in quotes if it is text"
        )
        raise RecipeError(source.file, node.start_mark.line + 1, path, problem)
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
