"""`ccbench`: the command line. Errors become one clear line and a non-zero exit code.

This module loads only the standard library and the light signal gate: each command's module
(and what it needs: numpy, pandas, pint, pyvisa) is imported when that command runs, so that
`ccbench --help` and a mistyped command answer at once (docs/speed.md, "Start-up").
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

from sequencer import __version__
from sequencer.bench.signalgate import GATE, Terminated
from sequencer.cli.exits import EXIT_INTERRUPTED, why_stopped
from sequencer.model.errors import CcbenchError

if TYPE_CHECKING:
    from rich.console import Console

Handler = Callable[[argparse.Namespace, "Console"], int]
Adder = Callable[[argparse._SubParsersAction], None]

# Every command: the module that defines its arguments and runs it, and its line in
# `ccbench --help` (in the order shown). tests/cli/test_startup.py keeps each line the same as
# the one its module gives.
COMMANDS: dict[str, tuple[str, str]] = {
    "run": ("measurecmd", "measure, judge and store every device of a recipe"),
    "check": ("checkcmd", "validate a recipe and its station; print the plan"),
    "judge": ("judgecmd", "judge a curve recorded elsewhere (CSV voltage_V,current_A)"),
    "rejudge": ("judgecmd", "re-decide a stored run under a new recipe"),
    "report": ("reportcmd", "lot report: HTML with plots, a terminal summary, or an STDF V4 file"),
    "results": ("results", "list, filter and merge stored runs into one table"),
    "status": ("statuscmd", "how a run stands: progress, output, ending, ETA"),
    "study": ("studycmd", "gauge study or station comparison from stored runs"),
    "upload": ("uploadcmd", "send run folders' results to the shared database"),
    "schema": ("schemacmd", "print the JSON Schema of a recipe, station or dialect"),
    "probe": ("probecmd", "try a station's instrument and dialect key by key, the output off"),
    "sim": ("simcmd", "serve the simulated SMU standalone over TCP"),
}


def command_module(key: str) -> tuple[Adder, dict[str, Handler]]:
    """A command module's parser hook and its commands, imported on first use."""
    if key == "measurecmd":
        from sequencer.cli import measurecmd as m  # start-up speed: loads the whole bench

        return m.add_parser, m.COMMANDS
    if key == "checkcmd":
        from sequencer.cli import checkcmd as m  # start-up speed: loads recipe, plan, safety

        return m.add_parser, m.COMMANDS
    if key == "judgecmd":
        from sequencer.cli import judgecmd as m  # start-up speed: loads the judge and the store

        return m.add_parsers, m.COMMANDS
    if key == "reportcmd":
        from sequencer.cli import reportcmd as m  # start-up speed: loads the report's data

        return m.add_parser, m.COMMANDS
    if key == "results":
        from sequencer.cli import results as m  # start-up speed: loads the store's yields

        return m.add_parser, {"results": m.cmd_results}
    if key == "statuscmd":
        from sequencer.cli import statuscmd as m  # start-up speed: loads the run folder's reader

        return m.add_parser, {"status": m.cmd_status}
    if key == "studycmd":
        from sequencer.cli import studycmd as m  # start-up speed: loads the studies

        return m.add_parser, {"study": m.cmd_study}
    if key == "uploadcmd":
        from sequencer.cli import uploadcmd as m  # start-up speed: loads the shared store

        return m.add_parser, {"upload": m.cmd_upload}
    if key == "schemacmd":
        from sequencer.cli import schemacmd as m  # start-up speed: pydantic loads in the command

        return m.add_parser, {"schema": m.cmd_schema}
    if key == "probecmd":
        from sequencer.cli import probecmd as m  # start-up speed: loads the instruments

        return m.add_parser, {"probe": m.cmd_probe}
    from sequencer.cli import simcmd as m  # start-up speed: as every command

    return m.add_parser, m.COMMANDS


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The command line. With `command`, only the module of that command (if it is one) is
    loaded and its commands get their full arguments; every other command is named with its
    help line alone, which is all `ccbench --help` and a mistyped name need. With None, every
    command is complete (tests and the documentation)."""
    parser = argparse.ArgumentParser(
        prog="ccbench",
        description="Test and characterise two-terminal constant-current regulators with an SMU.",
    )
    parser.add_argument("--version", action="version", version=f"ccbench {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    chosen = COMMANDS[command][0] if command in COMMANDS else None
    added: set[str] = set()
    for name, (key, help_line) in COMMANDS.items():
        if command is not None and key != chosen:
            sub.add_parser(name, help=help_line, add_help=False)
        elif key not in added:
            added.add(key)
            command_module(key)[0](sub)
    return parser


def named_command(argv: Sequence[str]) -> str | None:
    """The command an argument list names: its first word that is not an option (`ccbench`'s
    own options, --help and --version, take no value)."""
    return next((word for word in argv if not word.startswith("-")), None)


def main(
    argv: Sequence[str] | None = None,
    console: Console | None = None,
    *,
    exiting: bool = False,
) -> int:
    """Run one command; returns its exit code. `exiting`: the process ends after this (the
    `ccbench` program itself), so stop signals stay ignored once the command is over."""
    argv = sys.argv[1:] if argv is None else list(argv)
    args = build_parser(named_command(argv) or "").parse_args(argv)
    args.argv = list(argv)  # for a --detach child
    given = console is not None
    console = console or _screen_console()
    handler = command_module(COMMANDS[args.command][0])[1][args.command]
    try:
        with GATE.installed(ignore_after=exiting):  # the first signal raises; more cannot
            return handler(args, console)  # cut a shutdown short
    except CcbenchError as exc:
        from rich.markup import escape  # start-up speed: rich loads once there is output

        # The message may quote a file: shown as written, never read as markup or emoji codes.
        _error(console, args, given, f"[bold red]ccbench:[/] {escape(str(exc))}")
        return exc.exit_code
    except (KeyboardInterrupt, Terminated) as exc:
        from rich.markup import escape  # start-up speed: as above

        _error(console, args, given, f"[bold yellow]ccbench:[/] {escape(why_stopped(exc))}")
        return EXIT_INTERRUPTED


def _error(console: Console, args: argparse.Namespace, given: bool, line: str) -> None:
    """The error line: on stderr under --json and whenever stdout is not a terminal (a script
    reading stdout gets the document or nothing; a log file gets the screen and the person at
    the terminal the error), on the screen otherwise. A console handed in (a test's) keeps it
    unless --json asks for a clean stdout. If stderr cannot be written (its reader gone), the
    line goes to the screen after all: it says how the output was left."""
    from rich.console import Console  # start-up speed: rich loads once there is output

    from sequencer.cli.screen import Screen  # start-up speed, as above

    json_mode = bool(getattr(args, "json", False))
    if not json_mode and (given or console.file.isatty()):
        console.print(line, soft_wrap=True, emoji=False)
        return
    errors = Console(file=Screen(sys.stderr, "stderr"), highlight=False)
    errors.print(line, soft_wrap=True, emoji=False)
    if errors.file.lost and not json_mode:  # type: ignore[attr-defined]
        console.print(line, soft_wrap=True, emoji=False)


def _screen_console() -> Console:
    from rich.console import Console  # start-up speed: not needed for --help

    from sequencer.cli.screen import Screen  # start-up speed, as above

    return Console(file=Screen(sys.stdout), highlight=False)


def entry() -> None:
    """The `ccbench` program: main, then an exit that a late signal cannot change."""
    sys.exit(main(exiting=True))


if __name__ == "__main__":
    entry()
