"""`ccbench results --spc FIGURE`: an individuals / moving-range chart of one figure over the
stored devices, per station, in the order measured, as a text summary.

The limits come from the first --baseline readings of each station (20 by default: common
practice, no source); the points after them are judged against those limits, never against
limits drawn from themselves.
"""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from rich.console import Console

from sequencer.model.errors import RecipeError
from sequencer.model.units import format_si
from sequencer.study.charts import Chart, individuals
from sequencer.study.rules import RULE_SETS

if TYPE_CHECKING:  # pandas is imported when the command runs, not on every ccbench start
    import pandas as pd

DEFAULT_BASELINE = 20  # readings: common practice, no source
SHOWN_ALARMS = 10


def add_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--spc", metavar="FIGURE", help="control chart summary of a figure (IP...)")
    parser.add_argument(
        "--baseline",
        type=int,
        default=DEFAULT_BASELINE,
        metavar="N",
        help=f"the first N readings of each station set the limits (default {DEFAULT_BASELINE})",
    )
    rules = [r for r in RULE_SETS if r != "beyond-limits"]
    parser.add_argument("--rules", choices=rules, default=rules[0], help="run rules to flag")


def show(
    table: pd.DataFrame, column: str, unit: str, args: argparse.Namespace, console: Console
) -> None:
    if args.baseline < 2:
        raise RecipeError(
            "command line", None, "--baseline", f"must be 2 or more (got {args.baseline})"
        )
    for station, group in table.groupby("station", sort=True, dropna=False):
        ordered = group.sort_values("measured", kind="stable")
        kept = ordered[ordered[column].notna()]
        if len(kept) < 2:
            console.print(f"station {station}: fewer than 2 readings of {args.spc}; no chart")
            continue
        base = min(args.baseline, len(kept))
        chart, moving = individuals(kept[column].to_numpy(), slice(0, base), args.rules)
        for line in summary(str(station), args.spc, unit, chart, moving, base, kept):
            console.print(line, soft_wrap=True)


def summary(
    station: str, name: str, unit: str, chart: Chart, moving: Chart, base: int, kept: pd.DataFrame
) -> list[str]:
    lim = chart.limits
    judged = len(chart.values) - base
    lines = [
        f"station {station}, {name}: {len(chart.values)} readings, limits from the first {base}",
        f"  centre {format_si(lim.centre, unit)}, limits {format_si(lim.lower, unit)} to "
        f"{format_si(lim.upper, unit)} (sigma {format_si(lim.sigma, unit)} from the moving range)",
    ]
    if judged <= 0:
        lines.append(
            "  every reading is in the baseline: nothing judged yet "
            "(measure more, or lower --baseline)"
        )
    devices = kept["device"].astype(str).to_list()
    # The moving range at index i spans readings i and i+1: name the later one.
    alarms = [(a.index, a.rule, a.text) for a in chart.alarms]
    alarms += [(a.index + 1, "moving range", a.text) for a in moving.alarms]
    alarms.sort()
    if not alarms:
        lines.append("  no alarms")
    for at, rule, text in alarms[:SHOWN_ALARMS]:
        lines.append(f"  alarm at reading {at + 1} ({devices[at]}): {rule} {text}")
    if len(alarms) > SHOWN_ALARMS:
        lines.append(f"  ... and {len(alarms) - SHOWN_ALARMS} more alarms")
    return lines
