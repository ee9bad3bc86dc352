"""The shared results database at the terminal: starting and ending the background sender of a
run (`sequencer.store.shared.shipper`), the `--database` option, and `ccbench upload`."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.console import Console

from sequencer.model.errors import RecipeError, StoreError
from sequencer.recipe.resultsdb import SharedDatabase
from sequencer.store.runstore import RunStore
from sequencer.store.shared.shipper import Shipper, station_database


def start_for(database: SharedDatabase | None, store: RunStore, console: Console) -> Shipper | None:
    if database is None:
        return None
    console.print(f"results also go to the shared database {database.shown}", soft_wrap=True)
    return Shipper(store.folder, database).start()


def finish(uploads: Shipper | None, console: Console) -> None:
    if uploads is not None:
        line = uploads.finish()
        style = "" if not uploads.pending() else "[bold yellow]"
        console.print(f"{style}{line}", soft_wrap=True, markup=bool(style), highlight=False)


def add_parser(sub: argparse._SubParsersAction) -> None:
    up = sub.add_parser("upload", help="send run folders' results to the shared database")
    up.add_argument("run_dirs", nargs="*", type=Path, metavar="RUN_DIR")
    up.add_argument("--under", type=Path, metavar="DIR", help="every run folder below DIR")
    up.add_argument(
        "--database", metavar="URL", help="this database, not the one each run's station names"
    )


def cmd_upload(args: argparse.Namespace, console: Console) -> int:
    from sequencer.store.export import find_runs  # start-up speed: pandas, for this command only

    if not args.run_dirs and args.under is None:
        raise RecipeError("command line", None, "", "name run folders or give --under DIR")
    chosen = database_option(args.database)
    failed = 0
    for folder in find_runs(args.run_dirs, args.under):
        database = chosen or station_database(folder)
        if database is None:
            console.print(f"{folder}: its station names no results_database; skipped")
            continue
        shipper = Shipper(folder, database)
        line = shipper.finish(wait_s=0)
        failed += bool(shipper.pending())
        console.print(f"{folder}: {line}", soft_wrap=True, markup=False, highlight=False)
    if failed:
        raise StoreError(f"{failed} run folders could not be sent completely; try again later")
    return 0


def database_option(url: str | None) -> SharedDatabase | None:
    """The command line's --database URL, checked as the station's would be."""
    if url is None:
        return None
    try:
        return SharedDatabase(url)
    except ValueError as exc:
        raise RecipeError("command line", None, "--database", str(exc)) from None
