"""The shared results database at the terminal: starting and ending the background sender of a
run (`sequencer.store.shared.shipper`), the `--database` option, and `ccbench upload`."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.console import Console

from sequencer.model.errors import CcbenchError, RecipeError, StoreError
from sequencer.recipe.resultsdb import SharedDatabase
from sequencer.store.runfolder import read_manifest
from sequencer.store.runstore import RunStore
from sequencer.store.shared.shipper import Shipper, station_database

SEND_DRY_RUN_HELP = "send a --sim run's results to the shared database too (marked as a dry run)"


def start_for(
    database: SharedDatabase | None,
    store: RunStore,
    console: Console,
    *,
    dry_run: bool = False,
    send: bool = False,
) -> Shipper | None:
    """The background sender for a run, or None. A dry run stays out of the shared database
    (its yields are production yields) unless the user asks for it."""
    if database is None:
        return None
    if dry_run and not send:
        console.print(
            f"a dry run (simulated instrument): results are not sent to the shared database "
            f"{database.shown}; add --send-dry-run to send them, marked as a dry run",
            soft_wrap=True,
        )
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
    up.add_argument("--send-dry-run", action="store_true", help=SEND_DRY_RUN_HELP)


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
        if is_dry_run(folder) and not args.send_dry_run:
            console.print(f"{folder}: a dry run (simulated instrument); skipped (--send-dry-run)")
            continue
        shipper = Shipper(folder, database)
        line = shipper.finish(wait_s=0)
        failed += bool(shipper.pending())
        console.print(f"{folder}: {line}", soft_wrap=True, markup=False, highlight=False)
    if failed:
        raise StoreError(f"{failed} run folders could not be sent completely; try again later")
    return 0


def is_dry_run(folder: Path) -> bool:
    """A run on the simulator (its manifest says so; older ones by their simulator settings)."""
    try:
        manifest = read_manifest(folder)
    except CcbenchError:
        return False
    return bool(manifest.get("dry_run", manifest.get("simulator") is not None))


def database_option(url: str | None) -> SharedDatabase | None:
    """The command line's --database URL, checked as the station's would be."""
    if url is None:
        return None
    try:
        return SharedDatabase(url)
    except ValueError as exc:
        raise RecipeError("command line", None, "--database", str(exc)) from None
