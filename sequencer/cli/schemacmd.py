"""`ccbench schema recipe|station|dialect`: the JSON Schema (draft 2020-12) of a file format.

An editor with YAML support completes and checks a recipe against it; the shipped files name
the copies in docs/schema/ on their first line (`# yaml-language-server: $schema=...`).
"""

from __future__ import annotations

import argparse

from rich.console import Console

# sequencer.recipe.format.schema.KINDS (a test keeps the two equal)
KINDS = ("recipe", "station", "dialect")


def add_parser(sub: argparse._SubParsersAction) -> None:
    schema = sub.add_parser("schema", help="print the JSON Schema of a recipe, station or dialect")
    schema.add_argument("format", choices=KINDS, help="which file format")


def cmd_schema(args: argparse.Namespace, console: Console) -> int:
    # Start-up speed: the formats build pydantic models at import; only this command needs them.
    from sequencer.recipe.format.schema import schema_text

    console.file.write(schema_text(args.format))  # as is: JSON, never rich markup
    console.file.flush()
    return 0
