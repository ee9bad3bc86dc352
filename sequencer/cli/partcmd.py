"""`ccbench run --part-by-part` at the terminal: the option, the run record's schedule, serials
from stdin, the lid from the interlock (or the Enter key), and each attempt's verdict drawn big.
The loop itself is `sequencer.bench.parts.run_parts`; this module only feeds and draws it."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable

from rich.console import Console, RenderableType

from sequencer.bench.lotrun import RunSummary
from sequencer.bench.parts import PartBench, PartResult, run_parts
from sequencer.bench.prompts import EnterKey, InterlockLid, Lid, NoHands, Scanner, SimulatedHands
from sequencer.cli import operatorview
from sequencer.cli.verdictview import verdict_panel
from sequencer.model.errors import RecipeError
from sequencer.recipe.load import Recipe
from sequencer.recipe.repeat import Repeat

FLAG_HELP = (
    "test parts one at a time: scan or type each serial, put the part in and close the lid, "
    "read the verdict; retests follow the recipe's part_by_part section"
)


def manifest_extras(recipe: Recipe, args: argparse.Namespace, repeat: Repeat | None) -> dict:
    """The run record's `schedule` for part-by-part testing (which has no rounds to repeat)."""
    if not args.part_by_part:
        return {}
    if repeat is not None:
        option = "--every/--for/--rounds" if args.every or args.rounds else "the recipe's repeat"
        raise RecipeError("command line", None, "--part-by-part", f"cannot be used with {option}")
    if len(recipe.station.instruments) > 1:
        problem = f"needs a station with one instrument ({recipe.station.file} names several)"
        raise RecipeError("command line", None, "--part-by-part", problem)
    return {"schedule": recipe.part_by_part.describe()}


def check_options(args: argparse.Namespace) -> None:
    """--operator-view belongs to part-by-part testing (before anything is opened)."""
    if getattr(args, "operator_view", False) and not args.part_by_part:
        raise RecipeError("command line", None, "--operator-view", "needs --part-by-part")


def render(item: object) -> RenderableType:
    """What the loop shows, as the terminal draws it: an attempt's verdict as a big panel."""
    if isinstance(item, PartResult):
        return verdict_panel(item.judgement, item.attempt, item.note)
    return item if isinstance(item, str) else str(item)


def from_command_line(
    console: Console,
    station: PartBench,
    simulated: bool,
    write: Callable[[str], None],
    operator_view: bool = False,
) -> RunSummary:
    """`ccbench run --part-by-part`: serials from the terminal (or whatever feeds stdin), the
    lid from the interlock; on the simulator the lid is moved by `SimulatedHands` (`write`
    sends its SCPI). `operator_view`: the production screen (cli.operatorview)."""
    draw = operatorview.render if operator_view else render

    def say(item: object) -> None:
        shown = draw(item)
        console.print(shown, soft_wrap=isinstance(shown, str))  # panels keep their layout

    recipe = station.recipe
    policy = recipe.part_by_part
    console.print(", ".join(filter(None, (policy.describe(), policy.serials.describe()))),
                  soft_wrap=True)  # fmt: skip
    scanner = Scanner(sys.stdin.readline, say, policy.serial_pattern, policy.serials.apply)
    lid: Lid
    if recipe.station.interlocked_fixture:
        hands = SimulatedHands(write) if simulated else NoHands()
        lid = InterlockLid(station.smu.interlock_closed, say, hands)
    else:
        lid = EnterKey(sys.stdin.readline, say)
    return run_parts(station, scanner, lid, say)
