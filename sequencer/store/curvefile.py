"""A curve recorded elsewhere: CSV with the header `voltage_V,current_A`, one point a line,
each value a plain decimal number.

Anything else is refused with one message naming the file and the line, so a user can fix it.
"""

from __future__ import annotations

import csv
from pathlib import Path

from sequencer.model.curve import Curve
from sequencer.model.errors import CurveFileError
from sequencer.recipe.units import UnitProblem, plain_number

HEADER = ["voltage_V", "current_A"]


def read_curve_csv(path: Path) -> Curve:
    name = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise CurveFileError(name, None, "file not found; check the path") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CurveFileError(name, None, f"cannot be read ({exc})") from None
    rows = list(csv.reader(text.splitlines()))
    if not rows or [c.strip() for c in rows[0]] != HEADER:
        got = ",".join(rows[0]) if rows else "an empty file"
        raise CurveFileError(name, 1, f"the header must be 'voltage_V,current_A' (got {got!r})")
    voltage, current = [], []
    for line, row in enumerate(rows[1:], start=2):
        if not row or all(not c.strip() for c in row):
            continue
        if len(row) != 2:
            raise CurveFileError(
                name, line, f"needs 2 values, voltage and current (got {len(row)})"
            )
        voltage.append(_number(name, line, "voltage_V", row[0]))
        current.append(_number(name, line, "current_A", row[1]))
    if len(voltage) < 3:
        raise CurveFileError(name, None, f"needs at least 3 points (got {len(voltage)})")
    return Curve.from_sweep(path.stem, voltage, current)


def _number(name: str, line: int, column: str, text: str) -> float:
    """A plain decimal number, finite (units.plain_number): not Python's '0.001_8' or 'nan'."""
    try:
        return plain_number(text)
    except UnitProblem as exc:
        raise CurveFileError(name, line, f"{column} {exc}") from None
