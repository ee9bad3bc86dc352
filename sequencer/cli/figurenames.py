"""The figures people name on the command line: short names, stored columns and units."""

from __future__ import annotations

from typing import TYPE_CHECKING

from sequencer.model.errors import RecipeError

if TYPE_CHECKING:  # pandas is imported when a command runs, not on every ccbench start
    import pandas as pd

SHOWN_FIGURES = (
    ("regulated_current_A", "IP", "A"),
    ("limiting_voltage_V", "VL", "V"),
    ("dynamic_impedance_ohm", "ZT", "Ω"),
    ("knee_impedance_ohm", "ZK", "Ω"),
)
UNITS = {"A": "A", "V": "V", "ohm": "Ω", "W": "W"}


def figure_column(table: pd.DataFrame, name: str, option: str = "--figure") -> tuple[str, str]:
    """(stored column, unit) for a short name (IP) or any numeric figure column."""
    for column, short, unit in SHOWN_FIGURES:
        if name in (short, column):
            return column, unit
    if name in table.columns and table[name].dtype.kind == "f":
        return name, UNITS.get(name.rpartition("_")[2], "")
    shown = ", ".join(short for _, short, _ in SHOWN_FIGURES)
    raise RecipeError(
        "command line", None, option, f"{name!r} is not a stored figure ({shown} or a column name)"
    )
