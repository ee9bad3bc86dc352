"""`ccbench study`: qualify a station from stored runs.

ccbench study grr --under runs/grr --figure IP --by operator --tolerance 0.36e-3
ccbench study compare runs/station-1 runs/station-2 --figure IP --tolerance 20e-6

A gauge study reads every stored device reading of the named figure: the part is the device's
serial, the appraiser is the run's operator (or station, or run), and each further reading of a
part by the same appraiser (another run, another pass) is a repeat.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import TYPE_CHECKING

from rich import box
from rich.console import Console
from rich.table import Table

from sequencer.cli.figurenames import figure_column
from sequencer.model.errors import RecipeError, StudyError
from sequencer.model.units import format_si

if TYPE_CHECKING:  # pandas and scipy are imported when the command runs, not on every start
    import pandas as pd

    from sequencer.study import agreement, grr

APPRAISERS = ("operator", "station", "run")
FIGURE_HELP = "figure to study: IP, VL, ZT, ZK or a column of `ccbench results --csv`"


def add_parser(sub: argparse._SubParsersAction) -> None:
    study = sub.add_parser("study", help="gauge study or station comparison from stored runs")
    kinds = study.add_subparsers(dest="study", required=True, metavar="STUDY")
    g = kinds.add_parser("grr", help="gauge repeatability and reproducibility (parts x appraisers)")
    g.add_argument("run_dirs", nargs="*", type=Path, metavar="RUN_DIR")
    g.add_argument("--under", type=Path, metavar="DIR", help="every run folder below DIR")
    g.add_argument("--figure", default="IP", help=FIGURE_HELP)
    g.add_argument("--by", choices=APPRAISERS, default="operator", help="what the appraiser is")
    g.add_argument("--tolerance", type=float, metavar="SI", help="upper minus lower limit (SI)")
    c = kinds.add_parser("compare", help="the same parts on a reference and a second station")
    c.add_argument("reference", type=Path, metavar="REFERENCE_RUN")
    c.add_argument("candidate", type=Path, metavar="OTHER_RUN")
    c.add_argument("--figure", default="IP", help=FIGURE_HELP)
    c.add_argument("--tolerance", type=float, metavar="SI", help="largest allowed difference (SI)")


def cmd_study(args: argparse.Namespace, console: Console) -> int:
    return {"grr": _grr, "compare": _compare}[args.study](args, console)


def _grr(args: argparse.Namespace, console: Console) -> int:
    # Start-up speed: the export module loads pandas, the study scipy.
    from sequencer.store.export import find_runs, merge_runs
    from sequencer.study import grr

    if not args.run_dirs and args.under is None:
        raise RecipeError("command line", None, "", "name run folders or give --under DIR")
    folders = find_runs(args.run_dirs, args.under)
    table = merge_runs(folders)
    column, unit = figure_column(table, args.figure)
    records = study_records(table, column, args.by)
    readings, parts, appraisers = grr.readings_table(records)
    studies = [grr.anova_study(readings, tolerance=args.tolerance)]
    try:
        studies.append(grr.range_study(readings, tolerance=args.tolerance))
    except StudyError as exc:  # no constants for this size: the ANOVA answer stands alone
        console.print(f"average-and-range method left out: {exc}", soft_wrap=True)
    console.print(
        f"{args.figure} from {len(folders)} runs: {len(parts)} parts x {len(appraisers)} "
        f"{args.by}s ({', '.join(appraisers)}) x {readings.shape[2]} repeats",
        soft_wrap=True,
    )
    console.print(gauge_table(studies, unit))
    console.print(anova_view(studies[0]))
    for line in gauge_lines(studies[0]):
        console.print(line, soft_wrap=True)
    return 0


def study_records(table: pd.DataFrame, column: str, by: str) -> list[tuple[str, str, float]]:
    """(part, appraiser, reading) for every stored reading of the figure (devices without it,
    e.g. opens, are left out; the balance check then names the cell that came up short)."""
    if table.empty:
        raise StudyError("no stored devices in the runs named: measure the study parts first")
    who = table[by].fillna("").astype(str)
    if (who == "").any():
        how = {"operator": "ccbench run --operator NAME", "station": "the station file's name"}
        raise StudyError(f"some runs have no {by} recorded: give each run one ({how[by]})")
    kept = table[column].notna()
    return list(zip(table["device"][kept].astype(str), who[kept], table[column][kept], strict=True))


def gauge_table(studies: list[grr.GaugeStudy], unit: str) -> Table:
    table = Table(
        title="Gauge study (standard deviations)", title_justify="left", box=box.SIMPLE_HEAD
    )
    table.add_column("")
    for s in studies:
        table.add_column(s.method, justify="right")
    table.add_column(f"{studies[0].method} 95 % interval", justify="right")
    bounds = {name: (low, high) for name, low, high in studies[0].intervals}
    rows = (
        ("repeatability (EV)", lambda s: format_si(s.repeatability, unit), "repeatability"),
        ("reproducibility (AV)", lambda s: format_si(s.reproducibility, unit), "reproducibility"),
        ("gauge R&R (GRR)", lambda s: format_si(s.grr, unit), ""),
        ("part to part (PV)", lambda s: format_si(s.part_to_part, unit), "part to part"),
        ("total (TV)", lambda s: format_si(s.total, unit), ""),
        ("%GRR of total", lambda s: f"{s.pct_grr_of_total:.1f}%", ""),
        ("%GRR of tolerance", lambda s: _pct(s.pct_grr_of_tolerance), ""),
        ("distinct categories", lambda s: _ndc(s.distinct_categories), ""),
    )
    for label, shown, key in rows:
        low, high = bounds.get(key, (None, None))
        interval = "" if low is None else f"{format_si(low, unit)} to {format_si(high, unit)}"
        table.add_row(label, *(shown(s) for s in studies), interval)
    return table


def anova_view(study: grr.GaugeStudy) -> Table:
    table = Table(title="ANOVA", title_justify="left", box=box.SIMPLE_HEAD)
    for column in ("source", "df", "SS", "MS", "F", "p"):
        table.add_column(column, justify="left" if column == "source" else "right")
    for row in study.anova:
        f = "" if row.f is None else f"{row.f:.3g}"
        p = "" if row.p is None else f"{row.p:.3g}"
        table.add_row(row.source, str(row.df), f"{row.ss:.4g}", f"{row.ms:.4g}", f, p)
    return table


def gauge_lines(study: grr.GaugeStudy) -> list[str]:
    lines = []
    if study.interaction_pooled:
        lines.append(
            "part x appraiser interaction not significant (p > 0.25): pooled into repeatability"
        )
    lines.append(
        f"verdict ({study.method}): {study.verdict} "
        "(AIAG MSA rule of thumb: under 10 % acceptable, 10-30 % depending on use, over 30 % not)"
    )
    if study.distinct_categories < 5:
        lines.append(
            "fewer than 5 distinct categories: the station cannot tell these parts apart well"
        )
    return lines


def _pct(value: float | None) -> str:
    return "—" if value is None or math.isnan(value) else f"{value:.1f}%"


def _ndc(value: int) -> str:
    return "1000 or more" if value >= 1000 else str(value)


def _compare(args: argparse.Namespace, console: Console) -> int:
    # Start-up speed: the export module loads pandas, the study scipy.
    from sequencer.store.export import load_run
    from sequencer.study import agreement

    ref, other = load_run(args.reference), load_run(args.candidate)
    column, unit = figure_column(ref, args.figure)
    x = ref.groupby("device")[column].mean().dropna()
    y = other.groupby("device")[column].mean().dropna()
    both = x.index.intersection(y.index)
    result = agreement.compare(x[both].to_numpy(), y[both].to_numpy(), tolerance=args.tolerance)
    console.print(f"{args.figure}: {result.pairs} parts on both stations", soft_wrap=True)
    for label, iv, shown in (
        ("slope", result.slope, lambda v: f"{v:.5f}"),
        ("offset", result.offset, lambda v: format_si(v, unit)),
        ("bias (other - reference)", result.bias, lambda v: format_si(v, unit)),
    ):
        console.print(
            f"{label}: {shown(iv.value)} (95 % interval {shown(iv.low)} to {shown(iv.high)})"
        )
    low, high = format_si(result.lower_limit, unit), format_si(result.upper_limit, unit)
    console.print(f"limits of agreement: {low} to {high}")
    console.print(f"verdict: {comparison_verdict(result, unit)}", soft_wrap=True)
    return 0


def comparison_verdict(result: agreement.Agreement, unit: str) -> str:
    found = f"; found {' and '.join(result.differences)}" if result.differences else ""
    if result.tolerance is None:
        return f"no tolerance given (--tolerance){found}"
    within = f"within +/-{format_si(result.tolerance, unit)}"
    return f"the stations {'agree' if result.agrees else 'do not agree'} {within}{found}"
