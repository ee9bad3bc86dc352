"""`ccbench results`: list, filter and merge stored runs into one table, on screen or to a file.

ccbench results runs/FK2611-07 runs/FK2611-08 --verdict fail
ccbench results --under runs --lot 'FK2611-*' --since 2026-05-01 --parquet lots.parquet
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import TYPE_CHECKING

from rich import box
from rich.console import Console
from rich.table import Table

from sequencer.cli import jsonout, spcview
from sequencer.cli.figurenames import SHOWN_FIGURES, figure_column
from sequencer.cli.runrows import run_rows
from sequencer.model.errors import RecipeError
from sequencer.model.units import format_si
from sequencer.store.yields import GROUPS, yield_by

if TYPE_CHECKING:  # pandas is imported when the command runs, not on every ccbench start
    import pandas as pd

VERDICTS = ("pass", "fail", "guard-band", "aborted")


def add_parser(sub: argparse._SubParsersAction) -> None:
    res = sub.add_parser("results", help="list, filter and merge stored runs into one table")
    res.add_argument("run_dirs", nargs="*", type=Path, metavar="RUN_DIR")
    res.add_argument("--under", type=Path, metavar="DIR", help="every run folder below DIR")
    res.add_argument("--lot", help="only this lot (wildcards allowed, e.g. 'FK2611-*')")
    res.add_argument("--product", help="only this product (wildcards allowed, e.g. 'FLC-1.8*')")
    res.add_argument("--since", metavar="DATE", help="only devices measured on or after DATE")
    res.add_argument("--verdict", choices=VERDICTS, help="only devices with this verdict")
    res.add_argument("--devices", action="store_true", help="list every device on screen")
    res.add_argument(
        "--dry-runs", action="store_true", help="--database: include runs on the simulator"
    )
    res.add_argument(
        "--database", metavar="URL", help="read the shared results database instead of folders"
    )
    res.add_argument("--by", choices=GROUPS, help="yield per station, lot or day")
    spcview.add_options(res)
    res.add_argument("--json", action="store_true", help=jsonout.FLAG_HELP)
    out = res.add_mutually_exclusive_group()
    out.add_argument("--csv", type=Path, metavar="OUT", help="write the merged table as CSV")
    out.add_argument("--parquet", type=Path, metavar="OUT", help="write it as Parquet")


def cmd_results(args: argparse.Namespace, console: Console) -> int:
    # Start-up speed: the export module loads pandas.
    from sequencer.store.export import Filter, find_runs, merge_runs, parse_since, write_table

    if not args.run_dirs and args.under is None and args.database is None:
        raise RecipeError(
            "command line", None, "", "name run folders or give --under DIR (or --database URL)"
        )
    since = parse_since(args.since) if args.since else None
    keep = Filter(args.lot, args.product, since, args.verdict, dry_runs=args.dry_runs)
    if args.database is not None:
        table, source = _shared(args, keep)
    else:
        folders = find_runs(args.run_dirs, args.under)
        table = merge_runs(folders, keep)
        source = f"of {len(folders)} runs"
    if args.json:
        return _json(args, console, table)
    console.print(runs_table(table, show_yield=args.verdict is None))
    if args.devices:
        console.print(devices_table(table))
    if args.by:
        console.print(yield_table(table, args.by))
    if args.spc:
        column, unit = figure_column(table, args.spc, "--spc")
        spcview.show(table, column, unit, args, console)
    target, kind = (args.parquet, "parquet") if args.parquet else (args.csv, "csv")
    if target is not None:
        write_table(table, target, kind)
    runs = table["folder"].nunique() if len(table) else 0
    saved = f"; written to {target}" if target is not None else ""
    console.print(f"{len(table)} devices from {runs} {source}{saved}", soft_wrap=True)
    return 0


def _json(args: argparse.Namespace, console: Console, table: pd.DataFrame) -> int:
    from sequencer.cli.resultsjson import results_document  # start-up speed: only when asked

    if args.spc:
        raise RecipeError("command line", None, "--spc", "has no JSON form; leave out --json")
    target, kind = (args.parquet, "parquet") if args.parquet else (args.csv, "csv")
    if target is not None:
        from sequencer.store.export import write_table  # start-up speed: pandas

        write_table(table, target, kind)
    where = "database" if args.database is not None else "folders"
    document = results_document(table, run_rows(table), args, where, target)
    jsonout.write(console, "results", document)
    return 0


def _shared(args: argparse.Namespace, keep: object) -> tuple[pd.DataFrame, str]:
    # Start-up speed: the shared store loads psycopg only when a database is asked for.
    from sequencer.cli.uploadcmd import database_option
    from sequencer.store.shared.query import load_shared

    if args.run_dirs or args.under is not None:
        raise RecipeError("command line", None, "--database", "reads no run folders; name none")
    database = database_option(args.database)
    return load_shared(database, keep), f"runs in the shared database {database.shown}"


def runs_table(frame: pd.DataFrame, *, show_yield: bool = True) -> Table:
    """One line per run: where, what, when, and how its (selected) devices came out; the yield
    is of the judged devices (pass and fail) and left out when a verdict filter is on."""
    table = Table(
        title="Runs",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        pad_edge=False,
        collapse_padding=True,
    )
    longest = max((len(str(f)) for f in frame["folder"].unique()), default=6)
    table.add_column("folder", overflow="fold", min_width=min(longest, 24))
    for column in ("lot", "started (UTC)", "status"):
        table.add_column(column, no_wrap=True)
    for column in ("devices", "pass", "fail", "yield"):
        table.add_column(column, justify="right", no_wrap=True)
    for r in run_rows(frame):
        share = r.judged_yield
        table.add_row(
            r.folder,
            r.lot,
            r.started[:16].replace("T", " "),
            r.status,
            f"{r.devices}" + (f" in {r.rounds} rounds" if r.rounds > 1 else ""),
            str(r.passed),
            str(r.failed),
            f"{100 * share:.1f}%" if not math.isnan(share) and show_yield else "—",
        )
    return table


def devices_table(frame: pd.DataFrame) -> Table:
    table = Table(title="Devices", title_justify="left", box=box.SIMPLE_HEAD)
    for column in ("folder", "device", "round", "verdict", *(s for _, s, _ in SHOWN_FIGURES)):
        table.add_column(column)
    for values in frame.to_dict("records"):
        figures = [_figure(values.get(col), unit) for col, _, unit in SHOWN_FIGURES]
        table.add_row(
            Path(values["folder"]).name,
            str(values["device"]),
            str(values["round"]),
            str(values["verdict"]),
            *figures,
        )
    return table


def _figure(value: object, unit: str) -> str:
    if not isinstance(value, int | float) or math.isnan(value):
        return "—"
    return format_si(float(value), unit)


def _text(value: object) -> str:
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)


SHORT = {"guard-band": "guard", "first-test yield": "1st yield"}  # fits 80 columns


def yield_table(frame: pd.DataFrame, by: str) -> Table:
    """The yield summary of `ccbench results --by` as a table that fits 80 columns."""
    table = Table(
        title=f"Yield per {by}",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        show_edge=False,
        padding=(0, 0),  # the box puts one space between columns: fits 80 columns
    )
    summary = yield_by(frame, by)
    for column in summary.columns:
        header = SHORT.get(column, column)
        table.add_column(header, justify="left" if column == by else "right", no_wrap=True)
    for row in summary.itertuples(index=False):
        *counts, first, final = row
        table.add_row(*(str(v) for v in counts), _percent(first), _percent(final))
    return table


def _percent(value: float) -> str:
    return "—" if math.isnan(value) else f"{100 * value:.1f}%"
