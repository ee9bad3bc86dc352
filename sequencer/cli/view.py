"""What people see on the terminal. rich lives here and in the CLI only; the core yields events."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table
from rich.text import Text

from sequencer.model.units import format_si
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.run.estimate import Estimate, describe

if TYPE_CHECKING:  # names for the hints only: `ccbench check` need not load the bench
    from sequencer.bench.lotrun import DeviceDone, RunSummary
    from sequencer.judge.engine import Figure, Judgement

VERDICT_STYLE = {
    "pass": "bold green",
    "fail": "bold red",
    "guard-band": "bold magenta",
    "aborted": "bold yellow",
}
SHORT = (
    ("regulated_current", "IP", "A"),
    ("limiting_voltage", "VL", "V"),
    ("dynamic_impedance", "ZT", "Ω"),
    ("knee_impedance", "ZK", "Ω"),
)


def figure_text(fig: Figure, unit: str) -> str:
    if not fig.known:
        return "—"
    return ("≥" if fig.at_least else "") + format_si(fig.value, unit)


def device_line(done: DeviceDone) -> Text:
    """One device in 80 columns (a demo line is 77 wide); its reasons go on a second line by
    design, indented, so neither is cut or wrapped mid-word on a narrow terminal. Names longer
    than the column are written whole, never shortened."""
    j: Judgement = done.judgement
    line = Text(f"{done.curve.channel:>3} {j.device:<13} ")
    line.append(f"{j.verdict:<4}", style=VERDICT_STYLE[j.verdict])
    for name, short, unit in SHORT:
        line.append(f" {short} {figure_text(j.figures[name], unit):>8}")
    second = "; ".join(j.notes)
    if j.hard_bin is not None and len(j.verdict) <= 4:
        line.append(f" bin {j.hard_bin}")
    elif j.hard_bin is not None:  # 'guard-band' takes the bin's room: the bin leads line two
        second = f"bin {j.hard_bin}" + (f"; {second}" if second else "")
    if second:
        line.append("\n    " + second, style="dim")
    return line


def plan_table(recipe: Recipe, plan: Plan) -> Table:
    table = Table(title=f"Plan for {recipe.product} (lot {recipe.lot})", title_justify="left")
    for column in ("step", "kind", "points", "levels", "compliance", "settle", "peak power"):
        table.add_column(column)
    for seg in plan.segments:
        levels = (
            f"{seg.levels_v[0]:g} … {seg.levels_v[-1]:g} V"
            if seg.kind == "sweep"
            else (f"{seg.levels_v[0]:g} V")
        )
        searched = seg.search is not None  # levels chosen at run time, within the range shown
        table.add_row(
            seg.step,
            "search" if searched else seg.kind,
            f"~{seg.expected_points}" if searched else str(len(seg.levels_v)),
            levels,
            format_si(seg.compliance_a, "A"),
            format_si(seg.settle_s, "s"),
            format_si(seg.peak_power_w, "W"),
        )
    return table


def plan_summary(recipe: Recipe, plan: Plan, estimate: Estimate | None = None) -> str:
    count = len(recipe.station.instruments)
    on = f"station {recipe.station.name}" + (f" ({count} instruments at once)" if count > 1 else "")
    timed = describe(estimate) if estimate else f"estimated {plan.estimated_seconds():.1f} s"
    return (
        f"{len(plan.channels)} devices x {plan.points_per_device} points, aperture "
        f"{format_si(plan.aperture_s, 's')}; peak {plan.peak_voltage_v:g} V, peak power "
        f"{format_si(plan.peak_power_w, 'W')}; {timed} on {on}"
    )


def summary_table(summary: RunSummary) -> Table:
    """This session's tests. The lot's yield is not here: it counts each part once, with the
    result that stands (store.yields, report.lotsummary), and is printed from the store."""
    table = Table(title="This session", title_justify="left", show_header=False)
    table.add_column(justify="right")
    table.add_column()
    table.add_row("tests", f"{summary.done} of {summary.total}")
    table.add_row("pass", str(summary.passed))
    table.add_row("fail", str(summary.failed))
    if summary.guarded:
        table.add_row("guard band", str(summary.guarded))
    if summary.aborted:
        table.add_row("aborted", str(summary.aborted))
    table.add_row("time", f"{summary.seconds:.1f} s")
    for reason, count in sorted(summary.reasons.items(), key=lambda kv: -kv[1]):
        table.add_row(f"{count} failed on", reason)
    return table


def progress_bar(console: Console) -> Progress:
    return Progress(
        TextColumn("measuring"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=console,
        transient=True,
    )


@contextmanager
def showing_devices(console: Console, total: int) -> Iterator[Callable[[DeviceDone], None]]:
    """A progress bar over `total` devices and the callback that prints each device's line."""
    with progress_bar(console) as progress:
        task = progress.add_task("devices", total=total)

        def shown(done: DeviceDone) -> None:
            # Wrapped at words by rich (never cut): a long reason folds under its device.
            progress.console.print(device_line(done))
            progress.advance(task)

        yield shown
