"""`ccbench check RECIPE`: validate a recipe and its station and print the plan, with nothing
opened or touched; and the preflight that `ccbench run` shares with it."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.console import Console

from sequencer.cli import jsonout
from sequencer.cli.checkjson import check_document
from sequencer.cli.safetyview import limits_table
from sequencer.cli.view import plan_summary, plan_table
from sequencer.model.errors import RecipeError
from sequencer.plan import judgecover
from sequencer.plan.make import make_plan
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe, load_recipe
from sequencer.run.estimate import predict
from sequencer.safety.chamber import preflight_temperatures
from sequencer.safety.rules import check_hazard, preflight

HAZARD_HELP = (
    "acknowledge levels above the station's touch-safe voltage (instead of the recipe's "
    "'hazardous_voltage: acknowledged')"
)


def add_parser(sub: argparse._SubParsersAction) -> None:
    check = sub.add_parser("check", help="validate a recipe and its station; print the plan")
    check.add_argument("recipe", type=Path)
    check.add_argument("--station", type=Path, help="station file instead of the recipe's")
    check.add_argument("--allow-hazardous-voltage", action="store_true", help=HAZARD_HELP)
    check.add_argument("--json", action="store_true", help=jsonout.FLAG_HELP)


def cmd_check(args: argparse.Namespace, console: Console) -> int:
    recipe = load_recipe(args.recipe, station_path=args.station)
    plan = make_plan(recipe)
    preflight_all(recipe, plan, args)
    warnings = judge_can_work(recipe, plan)
    prediction = predict(recipe, plan)  # reads the dialects: a refusal is the only line shown
    if args.json:
        jsonout.write(console, "check", check_document(recipe, plan, prediction, warnings))
        return 0
    for warning in warnings:
        console.print(f"[yellow]ccbench: warning:[/] {warning}", soft_wrap=True)
    console.print(plan_table(recipe, plan))
    console.print(limits_table(recipe, plan))
    console.print(plan_summary(recipe, plan, prediction), soft_wrap=True)
    console.print(f"{recipe.file}: valid; within the limits of station {recipe.station.name}")
    return 0


def judge_can_work(recipe: Recipe, plan: Plan) -> list[str]:
    """Refuse a plan that does not measure what the judge needs; the warnings of compliance at
    or below a regulated-current limit. The same for `check` and `run`."""
    problem = judgecover.unmeasured(plan, recipe.judge)
    if problem is not None:
        raise RecipeError(recipe.file, None, *problem)
    return [f"{recipe.file}: {w}" for w in judgecover.clamping(plan, recipe.judge)]


def preflight_all(recipe: Recipe, plan, args: argparse.Namespace) -> None:
    """Every planned level against the effective limits, every set point against the station's
    chamber range, then the hazardous-voltage rules."""
    limits = preflight(plan, recipe.effective_limits)
    preflight_temperatures(recipe.temperatures, recipe.station.chamber)
    check_hazard(
        plan,
        limits,
        station=recipe.station.name,
        interlocked=recipe.station.interlocked_fixture,
        acknowledged=recipe.hazardous_voltage_acknowledged or args.allow_hazardous_voltage,
    )


COMMANDS = {"check": cmd_check}
