"""`ccbench judge CURVE.csv` and `ccbench rejudge RUN_DIR`: the judge without an instrument."""

from __future__ import annotations

import argparse
import datetime as dt
import json
import math
from pathlib import Path

from rich.console import Console
from rich.table import Table

from sequencer.judge.engine import Judgement, judge_curve
from sequencer.judge.reasons import show
from sequencer.model.judgesettings import FIGURE_INFO, FIGURES, JudgeSettings
from sequencer.recipe.load import load_recipe, load_station
from sequencer.store.curvefile import read_curve_csv
from sequencer.store.rejudge import changes, load_run, rejudge, save, settings_for
from sequencer.store.runstore import device_row, figure_columns


def add_parsers(sub) -> None:
    judge = sub.add_parser(
        "judge", help="judge a curve recorded elsewhere (CSV voltage_V,current_A)"
    )
    judge.add_argument("curve", type=Path)
    judge.add_argument("--recipe", type=Path, help="judge with this recipe's settings and limits")
    judge.add_argument("--station", type=Path, help="station whose accuracy to use")
    judge.add_argument("--json", action="store_true", help="print one JSON object")

    again = sub.add_parser("rejudge", help="re-decide a stored run under a new recipe")
    again.add_argument("run_dir", type=Path)
    again.add_argument("--recipe", type=Path, required=True)
    again.add_argument(
        "--station", type=Path, help="take the accuracy from this station, not the stored one"
    )


def cmd_judge(args: argparse.Namespace, console: Console) -> int:
    curve = read_curve_csv(args.curve)
    settings = JudgeSettings()
    if args.recipe:
        settings = load_recipe(args.recipe, station_path=args.station).judge
    elif args.station:  # the usual conditions, measured to that station's accuracy
        settings = JudgeSettings(accuracy=load_station(args.station).accuracy)
    judgement = judge_curve(curve, settings)
    if args.json:
        text = json.dumps(as_json(judgement, str(args.curve), len(curve)), allow_nan=False)
        console.print(text, markup=False, highlight=False, soft_wrap=True)
    else:
        console.print(heading(judgement, str(args.curve)), soft_wrap=True, markup=False)
        console.print(figure_table(judgement))
        for note in judgement.notes:
            console.print(f"  {note}", soft_wrap=True, markup=False)
    return 0


def as_json(j: Judgement, file: str, points: int) -> dict:
    """One object: verdict, bins, reasons, and each figure (the devices.csv columns) with its
    standard uncertainty."""
    row = device_row(j, channel=0)
    out: dict = {"file": file, "points": points, "verdict": j.verdict}
    out.update(classification=j.classification, reasons=list(j.reasons))
    out.update(guard_band=list(j.guard_band), hard_bin=j.hard_bin, soft_bin=j.soft_bin)
    for column in figure_columns():
        out[column] = bool(row[column]) if column.endswith("_at_least") else row[column]
    return out


def heading(j: Judgement, title: str) -> str:
    return f"{title}: {j.verdict} ({j.classification}); bin {j.hard_bin} {j.soft_bin}"


def figure_table(j: Judgement) -> Table:
    table = Table()
    for column in ("figure", "value", "u (k=1)", "U = k u", "k", "dof"):
        table.add_column(column, justify="left" if column == "figure" else "right")
    for name in FIGURES:
        fig = j.figures[name]
        if not fig.known:
            continue
        value = ("≥ " if fig.at_least else "") + show(name, fig.value)
        known = not math.isnan(fig.uncertainty)
        u = show(name, fig.uncertainty) if known else "—"
        big_u = show(name, fig.expanded) if known else "—"
        k = f"{fig.coverage_factor:.3g}" if known else "—"
        dof = "—" if not known else "> 1000" if fig.dof > 1000 else f"{fig.dof:.1f}"
        table.add_row(FIGURE_INFO[name][2], value, u, big_u, k, dof)
    return table


def cmd_rejudge(args: argparse.Namespace, console: Console) -> int:
    recipe = load_recipe(args.recipe, station_path=args.station)
    run = load_run(args.run_dir)
    settings, accuracy_from = settings_for(recipe, run, own_station=args.station is not None)
    if run.status == "running":
        console.print("[yellow]the run is marked running: judging the devices stored so far[/]")
    judgements = rejudge(run, settings)
    now = dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds")
    path = save(run, judgements, recipe, accuracy_from, now)
    counts = {v: sum(j.verdict == v for j in judgements) for v in ("pass", "fail", "guard-band")}
    console.print(
        f"{len(judgements)} devices re-judged under {recipe.file} (accuracy: {accuracy_from}): "
        + ", ".join(f"{n} {v}" for v, n in counts.items()),
        soft_wrap=True,
    )
    for (before, after), n in sorted(changes(run, judgements).items()):
        console.print(f"  {n} x {before} -> {after}", soft_wrap=True)
    console.print(f"results: {path} (the original results are unchanged)", soft_wrap=True)
    return 0


COMMANDS = {"judge": cmd_judge, "rejudge": cmd_rejudge}
