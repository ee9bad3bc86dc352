"""The `run` command's folder and schedule: new or resumed run, rounds, what the screen says.

cli.cmd_run calls these so that the command itself stays a short list of steps.
"""

from __future__ import annotations

import argparse
import datetime as dt
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from rich.console import Console

from sequencer.bench.lotrun import RunSummary
from sequencer.bench.schedule import Wait, run_rounds, work_left
from sequencer.model.errors import RecipeError, StoreError
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.recipe.repeat import Repeat, repeat_from_options
from sequencer.store.runfolder import FolderRefused, read_manifest
from sequencer.store.runstore import RunStore


def add_run_options(run: argparse.ArgumentParser) -> None:
    run.add_argument(
        "--resume",
        action="store_true",
        help="continue the interrupted run in the --out folder (devices done are skipped)",
    )
    run.add_argument(
        "--accept-changed-recipe",
        action="store_true",
        help="with --resume: continue although the recipe or station file changed",
    )
    run.add_argument(
        "--every", metavar="TIME", help="repeat the pass over the tray every TIME, e.g. '10 min'"
    )
    run.add_argument(
        "--for",
        dest="for_",
        metavar="TIME",
        help="with --every: repeat for TIME from the start, e.g. '8 h' (else until stopped)",
    )
    run.add_argument("--rounds", type=int, metavar="N", help="at most N rounds over the tray")


def repeat_for(recipe: Recipe, args: argparse.Namespace) -> Repeat | None:
    """The schedule: the command line's options, else (resuming) the one the run began with,
    else the recipe's `repeat`, else one round. A resumed overnight run given no options keeps
    its rounds: it used to finish the round in flight and stop."""
    given = (args.every, args.for_, args.rounds) != (None, None, None)
    if args.resume and not given and args.out is not None:
        stored = stored_repeat(args.out)
        if stored is not None:
            return stored
    return repeat_from_options(args.every, args.for_, args.rounds, recipe.repeat)


def stored_repeat(folder: Path) -> Repeat | None:
    """The schedule a run folder's manifest records (None: one round, or an older manifest)."""
    try:
        kept = read_manifest(folder).get("repeat")
    except (FolderRefused, StoreError, OSError, ValueError):
        return None
    if not isinstance(kept, dict):
        return None
    try:
        rounds = kept.get("rounds", kept.get("passes"))  # `passes` in manifests before schema 8
        return Repeat(float(kept["every_s"]), kept.get("for_s"), rounds)
    except (KeyError, TypeError, ValueError):
        return None


def manifest_extras(recipe: Recipe, resource: str, repeat: Repeat | None) -> dict[str, Any]:
    """What the run manifest holds beyond the CLI's own fields."""
    options = recipe.station.simulator_options if resource == "sim" else {}
    return {
        "simulator_seed": options.get("seed"),
        "schedule": None if repeat is None else repeat.describe(),
        "repeat": None if repeat is None else repeat.as_dict(),  # what a resume continues
    }


def open_store(
    out: Path, manifest: dict[str, Any], args: argparse.Namespace, console: Console
) -> RunStore:
    """Lock the folder and open a new run in it, or continue the one it holds (--resume)."""
    if args.accept_changed_recipe and not args.resume:
        raise RecipeError("command line", None, "--accept-changed-recipe", "needs --resume")
    if args.resume and args.out is None:
        raise RecipeError("command line", None, "--resume", "needs --out, the run's folder")
    if not args.resume:
        store = RunStore.create(out, manifest)
        for note in store.progress.notes:  # a folder left by a run that never reached its SMU
            console.print(f"[yellow]note:[/] {note}", soft_wrap=True)
        return store
    store = RunStore.resume(out, manifest, accept_changed_recipe=args.accept_changed_recipe)
    for note in store.progress.notes:
        console.print(f"[yellow]resume:[/] {note}", soft_wrap=True)
    p = store.progress
    if p.stored:
        console.print(
            f"resume: session {p.session}; {p.stored} devices stored; round {p.round_no} has "
            f"{len(p.done)} devices done",
            soft_wrap=True,
        )
    return store


def nothing_left(
    console: Console, store: RunStore, plan: Plan, repeat: Repeat | None, finished: str
) -> bool:
    """True (and the folder closed) when a resumed run has nothing left to measure."""
    if work_left(store.progress, plan, repeat, time.time()):
        return False
    problem = store.finish("completed", finished)
    console.print(
        f"{store.folder}: nothing left to measure; every device of the run is stored",
        soft_wrap=True,
    )
    if problem:
        console.print(f"[yellow]ccbench:[/] {problem}", soft_wrap=True)
    return True


def measure_rounds(
    console: Console,
    store: RunStore,
    plan: Plan,
    repeat: Repeat | None,
    measure: Callable[[Plan], RunSummary],
) -> RunSummary:
    """Every round the schedule asks for (one without a schedule), with a line per round."""
    if repeat is not None:
        console.print(f"schedule: {repeat.describe()}", soft_wrap=True)

    def round_done(number: int, part: RunSummary) -> None:
        if repeat is not None:
            console.print(f"round {number} done: {_counts(part)}", soft_wrap=True)

    def waiting(wait: Wait) -> None:
        at = dt.datetime.fromtimestamp(wait.due).strftime("%H:%M:%S")
        console.print(
            f"round {wait.round_no} starts at {at} (in {wait.seconds:.0f} s); output off; "
            "Ctrl-C stops the run",
            soft_wrap=True,
        )

    summary = run_rounds(store, plan, repeat, measure, on_round=round_done, on_wait=waiting)
    if repeat is not None or store.progress.stored:
        devices, rounds = store.counts()
        over = f"{rounds} round" + ("s" if rounds != 1 else "")
        console.print(f"run in all: {devices} devices stored over {over}", soft_wrap=True)
    return summary


def _counts(s: RunSummary) -> str:
    text = f"{s.done} devices, {s.passed} pass, {s.failed} fail"
    return text + (f", {s.aborted} aborted" if s.aborted else "")
