"""`ccbench`: the command line. Errors become one clear line and a non-zero exit code."""

from __future__ import annotations

import argparse
import datetime as dt
import getpass
import json
import os
import platform
import signal
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path

from rich.console import Console

from . import __version__, results, runsession
from .errors import CcbenchError, RunError, SafetyError
from .lotrun import run_lot
from .plan import make_plan
from .recipe import Recipe, load_recipe
from .safety import CAUTION, is_hazardous, preflight
from .view import device_line, plan_summary, plan_table, progress_bar, summary_table

EXIT_INTERRUPTED = 130


class Terminated(BaseException):
    """SIGTERM, turned into an exception so that every `finally` switches the output off."""


def _on_sigterm(signum, frame) -> None:
    raise Terminated()


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ccbench",
        description="Test and characterise two-terminal constant-current regulators with an SMU.",
    )
    parser.add_argument("--version", action="version", version=f"ccbench {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    run = sub.add_parser("run", help="measure, judge and store every device of a recipe")
    run.add_argument("recipe", type=Path)
    run.add_argument("--sim", action="store_true", help="use the embedded simulated SMU")
    run.add_argument("--out", type=Path, help="run folder (default runs/<lot>-<time>)")
    run.add_argument("--station", type=Path, help="station file instead of the recipe's")
    run.add_argument("--operator", default="", help="operator name for the records")
    runsession.add_run_options(run)

    check = sub.add_parser("check", help="validate a recipe and its station; print the plan")
    check.add_argument("recipe", type=Path)
    check.add_argument("--station", type=Path, help="station file instead of the recipe's")

    results.add_parser(sub)

    sim = sub.add_parser("sim", help="serve the simulated SMU standalone over TCP")
    sim.add_argument("--port", type=int, default=0)
    sim.add_argument("--seed", type=int, default=1)
    sim.add_argument("--devices", type=int, default=20)
    sim.add_argument("--preset", default="FLC-1.8")
    return parser


def main(argv: Sequence[str] | None = None, console: Console | None = None) -> int:
    console = console or Console(highlight=False)
    args = build_parser().parse_args(argv)
    signal.signal(signal.SIGTERM, _on_sigterm)
    try:
        return COMMANDS[args.command](args, console)
    except CcbenchError as exc:
        console.print(f"[bold red]ccbench:[/] {exc}", soft_wrap=True)
        return exc.exit_code
    except (KeyboardInterrupt, Terminated) as exc:
        what = "Ctrl-C" if isinstance(exc, KeyboardInterrupt) else "SIGTERM"
        console.print(
            f"[bold yellow]ccbench:[/] stopped by {what}; output switched off, results kept",
            soft_wrap=True,
        )
        return EXIT_INTERRUPTED


def cmd_check(args: argparse.Namespace, console: Console) -> int:
    recipe = load_recipe(args.recipe, station_path=args.station)
    plan = make_plan(recipe)
    preflight(plan, recipe.station.limits)
    console.print(plan_table(recipe, plan))
    console.print(plan_summary(recipe, plan), soft_wrap=True)
    console.print(f"{recipe.file}: valid; within the limits of station {recipe.station.name}")
    return 0


def cmd_run(args: argparse.Namespace, console: Console) -> int:
    from instruments import InstrumentError, connect

    recipe = load_recipe(args.recipe, station_path=args.station)
    plan = make_plan(recipe)
    preflight(plan, recipe.station.limits)
    resource = "sim" if args.sim else recipe.station.resource
    _cautions(console, recipe, plan)
    console.print(plan_summary(recipe, plan), soft_wrap=True)
    out = args.out or Path("runs") / f"{recipe.lot}-{dt.datetime.now():%Y%m%d-%H%M%S}"
    repeat = runsession.repeat_for(recipe, args)
    manifest = _manifest(recipe, args, resource)
    manifest |= runsession.manifest_extras(recipe, resource, repeat)
    store = runsession.open_store(out, manifest, args, console)
    if runsession.nothing_left(console, store, plan, repeat, _now()):
        return 0
    status = "failed"
    try:
        with open(out / "scpi.log", "a", encoding="utf-8") as log:
            conn = connect(
                resource,
                dialect=recipe.station.dialect,
                timeout_s=recipe.station.timeout_s,
                spy_log=log,
                sim_options=recipe.station.simulator_options if resource == "sim" else None,
            )
            with conn:
                store.set_identity(conn.resource, conn.identity)
                console.print(f"instrument: {conn.identity} at {conn.resource}", soft_wrap=True)
                conn.smu.safe_state()

                def measure(part):
                    return _measure(console, recipe, part, conn.smu, store)

                summary = runsession.measure_passes(console, store, plan, repeat, measure)
        status = summary.status
    except InstrumentError as exc:
        raise RunError(f"instrument: {exc}") from None
    except (KeyboardInterrupt, Terminated):
        status = "interrupted"
        raise
    finally:
        problem = store.finish(status, _now())  # after a failure, the failure is the news
        if problem and status == "completed":
            console.print(f"[bold yellow]ccbench:[/] {problem}", soft_wrap=True)
    console.print(summary_table(summary))
    console.print(f"results: {out / 'devices.csv'}", soft_wrap=True)
    return 0


def _measure(console, recipe, plan, smu, store):
    with progress_bar(console) as progress:
        task = progress.add_task("devices", total=len(plan.channels))

        def shown(done):
            progress.console.print(device_line(done), soft_wrap=True)
            progress.advance(task)

        return run_lot(recipe, plan, smu, store, shown)


def _cautions(console: Console, recipe: Recipe, plan) -> None:
    console.print(f"[yellow]{CAUTION}[/]", soft_wrap=True)
    if is_hazardous(plan, recipe.station.limits):
        if not recipe.station.interlocked_fixture:
            raise SafetyError(
                f"the plan reaches {plan.peak_voltage_v:g} V, above the touch-safe "
                f"{recipe.station.limits.touch_safe_v:g} V, but station "
                f"{recipe.station.name} declares no interlocked fixture"
            )
        console.print(
            f"[bold red]HAZARDOUS VOLTAGE:[/] this run applies up to {plan.peak_voltage_v:g} V "
            f"(touch-safe limit {recipe.station.limits.touch_safe_v:g} V). The fixture lid must "
            "stay closed; the run stops if the interlock opens.",
            soft_wrap=True,
        )


def _manifest(recipe: Recipe, args: argparse.Namespace, resource: str) -> dict[str, object]:
    return {
        "started": _now(),
        "product": recipe.product,
        "lot": recipe.lot,
        "operator": args.operator or recipe.operator or getpass.getuser(),
        "host": platform.node(),
        "software_version": __version__,
        "recipe_file": recipe.file,
        "recipe_sha256": recipe.digest,
        "recipe_text": recipe.text,
        "station": recipe.station.name,
        "station_text": recipe.station.text,
        "resource": resource,
        "simulator": json.dumps(recipe.station.simulator_options) if resource == "sim" else None,
    }


def _now() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds")


def cmd_sim(args: argparse.Namespace, console: Console) -> int:
    console.print("[yellow]simulated SMU: no real output; Ctrl-C stops it[/]")
    command = [sys.executable, "-m", "simulator", "serve", "--port", str(args.port)]
    command += ["--seed", str(args.seed), "--devices", str(args.devices), "--preset", args.preset]
    try:
        return subprocess.call(command, env=dict(os.environ))
    except KeyboardInterrupt:
        return 0


COMMANDS = {"run": cmd_run, "check": cmd_check, "sim": cmd_sim, "results": results.cmd_results}


if __name__ == "__main__":
    sys.exit(main())
