"""Machine-readable output: `--json` prints one JSON document on stdout, and nothing else.

Every document is an object with `format` (the command and a version that changes only when a
key changes meaning or goes away: scripts can check it) and the command's own keys. Numbers are
SI floats; a key that holds one names its unit (`peak_voltage_V`, `seconds`), or the object
beside it carries `unit`. A number that is not known (NaN, no limit) is `null`, never a string.
Verdicts and bin classes are the words the store keeps (`pass`, `fail`, `guard-band`,
`aborted`). Errors never reach stdout in this mode (cli.main sends them to stderr), so a
script that reads stdout gets a document or nothing.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

from rich.console import Console

VERSION = 1


def clean(value: Any) -> Any:
    """Plain JSON values: NaN and infinities become null, numpy scalars Python numbers,
    tuples lists (json.dumps would write NaN, which no JSON parser must accept)."""
    if isinstance(value, Mapping):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [clean(v) for v in value]
    if hasattr(value, "item") and callable(value.item):  # a numpy scalar
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def number(value: float | None) -> float | None:
    """An SI float, or None where there is none."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def document(command: str, body: Mapping[str, Any]) -> dict[str, Any]:
    return {"format": f"ccbench-{command}/{VERSION}", **clean(body)}


def write(console: Console, command: str, body: Mapping[str, Any]) -> None:
    """The document as one line on the console's stream, bypassing rich (no markup, no
    wrapping); a stream that went away is the Screen's to handle."""
    text = json.dumps(document(command, body), ensure_ascii=False, allow_nan=False)
    console.file.write(text + "\n")
    console.file.flush()


FLAG_HELP = "print one JSON document on stdout (errors on stderr)"
