"""`ccbench probe STATION`: try the station's instrument with its dialect, key by key, the output
off (instruments.probe), and say whether a run could work; `ccbench probe --dialect FILE`
checks a dialect file alone, touching no instrument. Exit 0 only when a run could work."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from sequencer.model.errors import RecipeError, RunError
from sequencer.recipe.instrumentspec import InstrumentSpec
from sequencer.recipe.load import Station, load_station
from sequencer.safety.rules import CAUTION

EXIT_CANNOT_RUN = 1
WITH_OUTPUT_HELP = (
    "also take one reading and run a list of two points at 0 V into the station's current "
    "limit: the output is switched on"
)
MARKS = {"accepted": "[green]accepted[/]", "refused": "[bold red]refused[/]"}


def add_parser(sub: argparse._SubParsersAction) -> None:
    probe = sub.add_parser(
        "probe", help="try a station's instrument and dialect key by key, the output off"
    )
    probe.add_argument("station", type=Path, nargs="?", help="station file")
    probe.add_argument("--dialect", type=Path, help="dialect file (alone: check it, no instrument)")
    probe.add_argument("--instrument", help="which instrument of a station with several (name)")
    probe.add_argument("--with-output", action="store_true", help=WITH_OUTPUT_HELP)


def cmd_probe(args: argparse.Namespace, console: Console) -> int:
    if args.station is None:
        if args.dialect is None:
            detail = "needs a station file (ccbench probe STATION) or --dialect FILE"
            raise RecipeError("command line", None, "probe", detail)
        return _dialect_alone(args.dialect, console)
    station = load_station(args.station)
    spec = _instrument(station, args.instrument)
    dialect = _dialect(str(args.dialect) if args.dialect else spec.dialect, station.file)
    limit_a = station.limits.max_current_a
    if args.with_output:
        console.print(f"[yellow]{CAUTION}[/]", soft_wrap=True)
        console.print(
            f"the output will be switched on at 0 V into {limit_a:g} A (--with-output)",
            soft_wrap=True,
        )
    report = _probe(station, spec, dialect, limit_a, args.with_output)
    _show(console, report, dialect)
    return 0 if report.can_run else EXIT_CANNOT_RUN


def _instrument(station: Station, name: str | None) -> InstrumentSpec:
    specs = station.instruments
    if name is None:
        return specs[0]
    for spec in specs:
        if spec.name == name:
            return spec
    names = ", ".join(s.name for s in specs)
    raise RecipeError("command line", None, "--instrument", f"is not one of {names}")


def _dialect(name: str, where: str):
    from instruments import DialectError, load_dialect  # start-up speed: loads pyvisa

    try:
        return load_dialect(name)
    except DialectError as exc:
        raise RecipeError(exc.file, exc.line, exc.key or "", exc.detail) from None


def _probe(station: Station, spec: InstrumentSpec, dialect, limit_a: float, with_output: bool):
    from instruments import InstrumentError, connect  # start-up speed: loads pyvisa
    from instruments.probe import probe

    sim = spec.resource == "sim"
    try:
        conn = connect(
            spec.resource,
            dialect=dialect.source,
            timeout_s=spec.timeout_s,
            sim_options=station.simulator_options if sim else None,
            channels=spec.channels,
            **spec.link.connect_options(),
        )
    except InstrumentError as exc:
        raise RunError(f"instrument: {exc}; the output was not switched on") from None
    try:
        return probe(conn.smu, channels=spec.channels, limit_a=limit_a, with_output=with_output)
    except InstrumentError as exc:
        ending = "THE OUTPUT MAY STILL BE ON" if with_output else "the output was not switched on"
        raise RunError(f"instrument: {exc}; {ending}") from None
    finally:
        conn.close()


def _show(console: Console, report, dialect) -> None:
    console.print(
        f"instrument: {escape(report.identity)}; dialect {dialect.name} ({dialect.source})",
        soft_wrap=True,
    )
    if report.stale_errors:
        found = "; ".join(f"{code},{text}" for code, text in report.stale_errors)
        console.print(f"error queue at start (cleared): {escape(found)}", soft_wrap=True)
    else:
        console.print("error queue at start: empty")
    table = Table("key", "outcome", "detail", box=None, pad_edge=False)
    for result in report.results:
        mark = MARKS.get(result.outcome, result.outcome)
        table.add_row(result.key, mark, escape(result.detail))
    console.print(table)
    state = {False: "off (read back)", True: "ON (read back)", None: "not read back"}
    console.print(f"output: {state[report.output_read_back]}")
    for note in report.notes:
        console.print(f"[yellow]note:[/] {escape(note)}", soft_wrap=True)
    for problem in report.problems:
        console.print(f"[bold red]cannot run:[/] {escape(problem)}", soft_wrap=True)
    if report.can_run:
        untried = [r.key for r in report.results if r.outcome == "untried"]
        more = f" (not tried with the output off: {', '.join(untried)})" if untried else ""
        console.print(f"a run with this dialect could work{more}", soft_wrap=True)


def _dialect_alone(path: Path, console: Console) -> int:
    dialect = _dialect(str(path), str(path))
    table = Table("key", "text", box=None, pad_edge=False)
    for key, _line in sorted(dialect.key_lines, key=lambda item: item[1]):
        value = getattr(dialect, key, None)
        table.add_row(key, "null" if value is None else escape(str(value)))
    console.print(table)
    rules = dialect.compliance_rules()
    read, write = dialect.terminators
    lists = f"yes, clamp told by {rules['list']}" if dialect.has_lists else "no (point by point)"
    console.print(
        f"{path}: valid dialect {dialect.name}; single readings: clamp told by "
        f"{rules['single']}; lists: {lists}; "
        f"terminators: read {read}, write {write}; "
        f"identify: {dialect.identify or 'none'}",
        soft_wrap=True,
    )
    return 0
