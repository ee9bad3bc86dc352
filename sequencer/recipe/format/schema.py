"""JSON Schema (draft 2020-12) of the recipe, station and dialect formats, from their models.

`ccbench schema recipe` prints one; docs/schema/ holds them for editors (a shipped file's first
line `# yaml-language-server: $schema=...` points there), and format.reference writes the key
reference page from the same schemas.
"""

from __future__ import annotations

import json
from typing import Any, Union

from pydantic import TypeAdapter

from instruments.dialectformat import ChamberDialect, SmuDialect
from sequencer.recipe.format.recipe import RecipeFile
from sequencer.recipe.format.station import StationFile

DRAFT = "https://json-schema.org/draft/2020-12/schema"
KINDS = ("recipe", "station", "dialect")
TITLES = {
    "recipe": "ccbench recipe",
    "station": "ccbench station",
    "dialect": "ccbench instrument dialect (SMU or chamber)",
}


def _model(kind: str) -> Any:
    if kind == "recipe":
        return RecipeFile
    if kind == "station":
        return StationFile
    return Union[SmuDialect, ChamberDialect]  # noqa: UP007 - a type, not an annotation


def schema(kind: str) -> dict[str, Any]:
    """The schema of one format, as a JSON-ready mapping."""
    body = TypeAdapter(_model(kind)).json_schema(mode="validation")
    _describe_units(body)
    head = {"$schema": DRAFT, "$id": f"urn:ccbench:schema:{kind}", "title": TITLES[kind]}
    body.pop("title", None)
    return head | body


def schema_text(kind: str) -> str:
    return json.dumps(schema(kind), indent=2, ensure_ascii=False) + "\n"


def _describe_units(node: Any) -> None:
    """A setting's description gains the unit its value is written in ("x-unit", from the type)."""
    if isinstance(node, list):
        for item in node:
            _describe_units(item)
        return
    if not isinstance(node, dict):
        return
    for prop in (node.get("properties") or {}).values():
        unit = unit_of(prop)
        if unit and "description" in prop:
            prop["description"] = f"{prop['description']}; {unit}"
    for value in node.values():
        _describe_units(value)


def unit_of(prop: dict[str, Any]) -> str:
    """The unit words of a property (or of its non-null alternative)."""
    if "x-unit" in prop:
        return str(prop["x-unit"])
    for member in prop.get("anyOf", ()):
        if isinstance(member, dict) and "x-unit" in member:
            return str(member["x-unit"])
    return ""
