"""`ccbench run --serials FILE` / `--first-serial SERIAL`: the serial each tray channel holds.

The map is read and checked before anything is opened (sequencer.recipe.traymap), recorded in
the run manifest (`tray_serials`), and kept by a resume: a resume given no map goes on with the
stored one, one given another map is refused (the devices already stored carry those names).
"""

from __future__ import annotations

import argparse
import dataclasses
from pathlib import Path

from sequencer.model.errors import RecipeError, StoreError
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.recipe.traymap import check_serials, counted_serials, read_serial_map
from sequencer.store.runfolder import FolderRefused, read_manifest

MANIFEST_KEY = "tray_serials"


def add_options(run: argparse.ArgumentParser) -> None:
    run.add_argument(
        "--serials", type=Path, metavar="CSV",
        help="tray serial map: 'channel,serial' lines naming every channel's part; recorded",
    )  # fmt: skip
    run.add_argument(
        "--first-serial", metavar="SERIAL",
        help="name the tray's parts from SERIAL counted up in channel order, e.g. FK2611-07-0041",
    )  # fmt: skip


def with_serials(recipe: Recipe, plan: Plan, args: argparse.Namespace) -> Recipe:
    """The recipe naming each tray channel's part as the command line (or, on resume, the run
    folder) says; unchanged when neither names any."""
    given = _given(recipe, plan, args)
    stored = _stored(args, plan)
    if given and stored is not None and given != stored:
        raise RecipeError(
            "command line", None, "--serials" if args.serials else "--first-serial",
            f"differs from the serials {args.out} was started with; resume without it",
        )  # fmt: skip
    serials = given or stored or {}
    return dataclasses.replace(recipe, tray_serials=serials) if serials else recipe


def manifest_extras(recipe: Recipe) -> dict[str, object]:
    if not recipe.tray_serials:
        return {}
    return {MANIFEST_KEY: {str(c): s for c, s in recipe.tray_serials.items()}}


def _given(recipe: Recipe, plan: Plan, args: argparse.Namespace) -> dict[int, str]:
    serials, first = getattr(args, "serials", None), getattr(args, "first_serial", None)
    if serials is None and first is None:
        return {}
    if serials is not None and first is not None:
        raise RecipeError("command line", None, "--serials", "and --first-serial: give one")
    if args.part_by_part:
        raise RecipeError(
            "command line", None, "--serials" if serials else "--first-serial",
            "names tray parts; part by part, each part's serial is scanned",
        )  # fmt: skip
    policy = recipe.part_by_part
    if serials is not None:
        return read_serial_map(serials, plan.channels, policy)
    return counted_serials(first, plan.channels, policy)


def _stored(args: argparse.Namespace, plan: Plan) -> dict[int, str] | None:
    if not args.resume or args.out is None:
        return None
    try:
        kept = read_manifest(args.out).get(MANIFEST_KEY)
    except (FolderRefused, StoreError, OSError, ValueError):
        return None
    if not isinstance(kept, dict):
        return None
    where = f"{args.out}/manifest.json"
    try:
        serials = {int(c): str(s) for c, s in kept.items()}
    except ValueError:
        problem = "holds a channel that is not a number"
        raise RecipeError(where, None, MANIFEST_KEY, problem) from None
    check_serials(serials, plan.channels, where)
    return serials
