"""The key reference page (docs/recipe-reference.md) and the schema files (docs/schema/), written
from the JSON Schemas of format.schema, so page, schema and loader are one description.

    python -m sequencer.recipe.format.reference           # from the checkout's top: rewrite them
    python -m sequencer.recipe.format.reference --check   # exit 1 when a file is out of date
"""

from __future__ import annotations

import json
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from sequencer.recipe.format.schema import KINDS, schema, schema_text, unit_of

PAGE = Path("docs/recipe-reference.md")
SCHEMA_DIR = Path("docs/schema")
INTRO = """\
# Recipe, station and dialect reference

Generated from the file formats (sequencer/recipe/format/, instruments/dialectformat.py) by
`python -m sequencer.recipe.format.reference`; do not edit by hand (a test compares the page
with the schemas). The JSON Schemas themselves: `ccbench schema recipe|station|dialect`, or
docs/schema/. A key marked *required* must be written; `[]` stands for every item of a list.
A quantity is one plain number and its unit ('25 V', '2 mA'), never a bare number.
"""


def page() -> str:
    parts = [INTRO]
    for kind in KINDS:
        root = schema(kind)
        title = root["title"].removeprefix("ccbench ")
        parts.append(f"\n## {title[:1].upper()}{title[1:]}\n")
        for title, rows in _tables(root):
            if title:
                parts.append(f"\n### {title}\n")
            parts.append("\n| key | type | unit | default | meaning |\n|---|---|---|---|---|\n")
            parts.extend(f"| {' | '.join(_cell(c) for c in row)} |\n" for row in rows)
    return "".join(parts)


def _tables(root: dict[str, Any]) -> Iterator[tuple[str, list[tuple[str, ...]]]]:
    """One table per alternative of the top (a dialect is an SMU's or a chamber's)."""
    defs = root.get("$defs", {})
    tops = root.get("anyOf") or [root]
    for top in tops:
        node = _resolved(top, defs)
        title = node.get("title", "") if len(tops) > 1 else ""
        yield title, list(_rows(node, "", defs, ()))


def _resolved(node: dict[str, Any], defs: dict[str, Any]) -> dict[str, Any]:
    while "$ref" in node:
        node = defs[node["$ref"].rsplit("/", 1)[-1]]
    return node


def _rows(
    node: dict[str, Any], path: str, defs: dict[str, Any], seen: tuple[str, ...]
) -> Iterator[tuple[str, ...]]:
    required = set(node.get("required", ()))
    for key, prop in node.get("properties", {}).items():
        where = f"{path}.{key}" if path else key
        default = "*required*" if key in required else _default(prop)
        meaning = prop.get("description", "")
        unit = unit_of(prop)
        if unit:
            meaning = meaning.removesuffix(f"; {unit}")
        yield where, _type(prop, defs), unit, default, meaning
        for child, suffix in _children(prop, defs):
            name = child.get("title", "")
            if name not in seen:
                yield from _rows(child, where + suffix, defs, (*seen, name))


def _children(prop: dict[str, Any], defs: dict[str, Any]) -> Iterator[tuple[dict[str, Any], str]]:
    """The mappings a value may hold, below its key ('' suffix) or its list items ('[]')."""
    for member in _members(prop):
        member = _resolved(member, defs)
        if member.get("type") == "object" and "properties" in member:
            yield member, ""
        elif member.get("type") == "array" and isinstance(member.get("items"), dict):
            for item in _members(member["items"]):
                item = _resolved(item, defs)
                if item.get("type") == "object" and "properties" in item:
                    yield item, "[]"
                elif "properties" not in item:
                    for deeper in _members(item):
                        deeper = _resolved(deeper, defs)
                        if deeper.get("type") == "object":
                            yield deeper, "[]"


def _members(prop: dict[str, Any]) -> list[dict[str, Any]]:
    """The alternatives of a value, nested ones flattened (an optional union is anyOf(oneOf))."""
    alternatives = prop.get("anyOf") or prop.get("oneOf")
    if not alternatives:
        return [prop]
    return [m for alternative in alternatives for m in _members(alternative)]


WORDS = {"string": "text", "number": "number", "integer": "whole number", "boolean": "true/false",
         "array": "list", "object": "mapping", "null": "null"}  # fmt: skip


def _type(prop: dict[str, Any], defs: dict[str, Any]) -> str:
    names = []
    for member in _members(prop):
        member = _resolved(member, defs)
        if "x-unit" in member:
            names.append("quantity")
        elif "enum" in member:
            names.append("one of " + ", ".join(str(v) for v in member["enum"]))
        elif "const" in member:
            names.append(f"'{member['const']}'")
        elif member.get("type") == "array":
            items = [_type(member["items"], defs)] if "items" in member else []
            names.append("list" + (f" of {items[0]}" if items else ""))
        else:
            kinds = member.get("type", "mapping")
            kinds = kinds if isinstance(kinds, list) else [kinds]
            names.append(" or ".join(WORDS.get(k, k) for k in kinds))
    shown = [n for n in names if n != "null"]
    return " or ".join(dict.fromkeys(shown)) + (" (or null)" if "null" in names else "")


def _default(prop: dict[str, Any]) -> str:
    if "default" not in prop:
        return ""
    value = prop["default"]
    if value is None:
        return "none"
    if isinstance(value, dict):
        return "its defaults"
    return json.dumps(value, ensure_ascii=False) if not isinstance(value, str) else repr(value)


def _cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def files() -> dict[Path, str]:
    """Every generated file and the text it must hold."""
    out = {SCHEMA_DIR / f"{kind}.schema.json": schema_text(kind) for kind in KINDS}
    return out | {PAGE: page()}


def main(argv: list[str]) -> int:
    stale = [path for path, text in files().items() if _read(path) != text]
    if "--check" in argv:
        for path in stale:
            print(f"{path} is out of date: run python -m sequencer.recipe.format.reference")
        return 1 if stale else 0
    for path, text in files().items():
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    print(f"wrote {', '.join(str(p) for p in files())}")
    return 0


def _read(path: Path) -> str | None:
    return path.read_text(encoding="utf-8") if path.exists() else None


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
