"""`ccbench report RUN_DIR [RUN_DIR...]`: the lot report as HTML with its PNGs beside it, on
the terminal (`--text`), or as an STDF V4 file (`--stdf FILE`); and the short summary after a
run. The plotting libraries are imported only when a picture is drawn."""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from rich.console import Console
from rich.table import Table

from sequencer.cli import jsonout
from sequencer.model.errors import CcbenchError
from sequencer.report.data import Lot, ReportError, bound_column, load_lot, u_column, value_column
from sequencer.report.lotsummary import figure_value, label, limits_text, reported_figures, standing


def add_parser(sub) -> None:
    report = sub.add_parser(
        "report", help="lot report: HTML with plots, a terminal summary, or an STDF V4 file"
    )
    report.add_argument("run_dirs", nargs="+", type=Path, metavar="RUN_DIR")
    report.add_argument("--out", type=Path, help="report folder (default RUN_DIR/report)")
    report.add_argument(
        "--device",
        action="append",
        default=[],
        metavar="NAME",
        help="also plot this device's I-V curve (repeatable)",
    )
    report.add_argument("--text", action="store_true", help="print the summary; write no HTML")
    report.add_argument("--json", action="store_true", help=f"with --text: {jsonout.FLAG_HELP}")
    report.add_argument("--stdf", type=Path, metavar="FILE", help="write the lot as STDF V4")


def cmd_report(args: argparse.Namespace, console: Console) -> int:
    lot = load_lot(args.run_dirs)
    rows = device_rows(lot, args.device)
    if args.json:
        return _json(console, lot, rows, args)
    if args.text:
        from sequencer.cli.lotview import print_lot  # start-up speed: each form loads its own

        print_lot(console, lot)
        for row in rows:
            console.print(device_table(lot, row))
    elif not args.stdf or args.out or rows:
        _write_html(console, lot, rows, _out_folder(args))
    if args.stdf:
        from sequencer.report.stdf import write_stdf  # start-up speed: each form loads its own

        parts = write_stdf(lot, args.stdf)
        console.print(f"STDF V4: {args.stdf} ({parts} part records)", soft_wrap=True)
    return 0


def _json(console: Console, lot: Lot, rows: list[int], args: argparse.Namespace) -> int:
    """The summary as JSON (--text implied: no HTML); an STDF file asked for is still written
    and named in the document."""
    from sequencer.cli.reportjson import report_document  # start-up speed: only when asked

    if args.out:
        raise ReportError("--json prints the summary and writes no HTML: leave out --out")
    document = report_document(lot, rows)
    if args.stdf:
        from sequencer.report.stdf import write_stdf  # start-up speed: each form loads its own

        document["stdf"] = {"file": str(args.stdf), "parts": write_stdf(lot, args.stdf)}
    jsonout.write(console, "report", document)
    return 0


def _out_folder(args: argparse.Namespace) -> Path:
    if args.out:
        return args.out
    if len(args.run_dirs) > 1:
        raise ReportError("several run folders make one report: name its folder with --out")
    return args.run_dirs[0] / "report"


def _write_html(console: Console, lot: Lot, rows: list[int], out: Path) -> None:
    # Start-up speed: the HTML page and its plots load matplotlib only when asked for.
    from sequencer.report.html import write_report
    from sequencer.report.plots import lot_plots  # start-up speed: matplotlib

    files = write_report(lot, lot_plots(lot, rows), out)
    console.print(f"report: {files.html} ({len(files.pngs)} PNG files beside it)", soft_wrap=True)


def device_rows(lot: Lot, names: list[str]) -> list[int]:
    """Every stored row of each named device (a retested device has several)."""
    return [int(row) for name in names for row in lot.rows_of(name)["row"]]


def device_table(lot: Lot, row: int) -> Table:
    dev = lot.devices.set_index("row").loc[row]
    title = f"{dev['device']}: {dev['verdict']}, bin {dev['hard_bin']} {dev['soft_bin']}"
    table = Table(title=title, title_justify="left", caption=str(dev["reasons"]) or None)
    for name in ("figure", "value", "u (k=1)", "limits"):
        table.add_column(name, justify="left" if name == "figure" else "right")
    for figure in reported_figures(lot):
        value, u = float(dev[value_column(figure)]), float(dev[u_column(figure)])
        bound = "≥ " if bool(dev[bound_column(figure)]) else ""
        spread = "—" if math.isnan(u) else figure_value(figure, u)
        limits = limits_text(standing(lot, figure))
        table.add_row(label(figure), bound + figure_value(figure, value), spread, limits)
    return table


def after_run(console: Console, folder: Path) -> None:
    """Bins and the worst figures of a finished run; a problem here never fails the run."""
    try:
        from sequencer.cli.lotview import print_after_run  # start-up speed

        print_after_run(console, load_lot([folder]))
        console.print(f"plots, HTML, STDF: ccbench report {folder}", soft_wrap=True)
    except CcbenchError as exc:
        console.print(f"[yellow]lot summary not shown:[/] {exc}", soft_wrap=True)


COMMANDS = {"report": cmd_report}
