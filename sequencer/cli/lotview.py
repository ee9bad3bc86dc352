"""The lot summary on the terminal, with rich: after every run and for `ccbench report --text`.

The same rows as the HTML report (`lotsummary`), so both say the same; nothing here needs a
browser or a picture.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from rich import box
from rich.console import Console
from rich.table import Table

from sequencer.report.data import Lot
from sequencer.report.lotsummary import (
    BIN_HEAD,
    CAPABILITY_HEAD,
    STANDING_HEAD,
    YIELD_HEAD,
    bin_cells,
    bins,
    capability_cells,
    lot_yield,
    percent,
    reported_figures,
    standing,
    standing_cells,
    standings,
    yield_cells,
    yields,
)

KEEP_WHOLE = (
    "worst device",
    "Cpk (95 %)",
    "value",
    "mean",
    "model ppm",
    "seen ppm",
)  # never folded


def _table(title: str, head: Sequence[str], rows: list[list[str]], styles: list[str]) -> Table:
    table = Table(title=title, title_justify="left")
    for k, name in enumerate(head):
        table.add_column(name, justify="left" if k == 0 else "right", no_wrap=name in KEEP_WHOLE)
    for cells, style in zip(rows, styles, strict=True):
        table.add_row(*cells, style=style or None)
    return table


def _rows(items: list, cells: Callable[..., list[str]], failing: Callable[..., bool]):
    return [cells(x) for x in items], ["red" if failing(x) else "" for x in items]


def yield_table(lot: Lot) -> Table:
    rows, styles = _rows(yields(lot), yield_cells, lambda r: False)
    return _table(f"Yield of {lot.name} (pass-class bins)", YIELD_HEAD, rows, styles)


def bins_table(lot: Lot) -> Table:
    rows, styles = _rows(bins(lot), bin_cells, lambda r: r.klass != "pass")
    return _table("Bins", BIN_HEAD, rows, styles)


def worst_table(lot: Lot) -> Table:
    """Every limited figure, the one closest to or beyond its limits first."""
    rows, styles = _rows(standings(lot), standing_cells, lambda r: r.margin < 0)
    table = _table("Figures closest to their limits", STANDING_HEAD, rows, styles)
    # Eight columns in 80: one space between them, and the margin ("+12 % band") kept whole.
    table.box, table.show_edge, table.padding = box.SIMPLE_HEAD, False, (0, 1, 0, 0)
    table.columns[STANDING_HEAD.index("margin")].no_wrap = True
    return table


def capability_table(lot: Lot) -> Table:
    items = [standing(lot, f) for f in reported_figures(lot)]
    rows, styles = _rows(items, capability_cells, lambda r: r.capability.cpk < 1.33)
    table = _table("Capability (Cpk 95 % interval: Bissell)", CAPABILITY_HEAD, rows, styles)
    table.caption = (
        "model ppm: fallout of the normal model; seen ppm: outside the limits in this lot, per "
        "million; red: Cpk below 1.33 (a common acceptance rule)"
    )
    return table


def print_after_run(console: Console, lot: Lot) -> None:
    """What follows the run's own summary: the lot's one yield (each part once, its standing
    result, in a pass-class bin: the same as `report` and `results`), bins, worst figures."""
    row = lot_yield(lot)
    console.print(
        f"lot yield: {row.shipped} of {row.devices} parts in pass-class bins "
        f"({percent(row.fraction)})",
        soft_wrap=True,
        highlight=False,
    )
    console.print(bins_table(lot))
    console.print(worst_table(lot))


def print_lot(console: Console, lot: Lot) -> None:
    """The whole summary of `ccbench report --text`."""
    for note in lot.notes:
        console.print(f"[yellow]note:[/] {note}", soft_wrap=True, highlight=False)
    console.print(yield_table(lot))
    console.print(bins_table(lot))
    console.print(worst_table(lot))
    console.print(capability_table(lot))
