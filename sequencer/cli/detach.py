"""`ccbench run ... --detach`: the run goes on in the background, whatever becomes of the terminal.

The same command is started again as a child in a session of its own (setsid): closing the
terminal or losing the SSH session hangs up the terminal's session, not the child's, so the run
goes to its end and switches the output off as every run does. The child's screen (stdout and
stderr) is appended to `screen.log` in the run folder, its stdin is /dev/null. The parent has
checked recipe, station and limits already (a refusal is one line here, nothing started); it
waits until the child holds the run folder's lock and has opened its run there, so exit 0
means the run has its folder, then
says where the run is and how to follow it. A child that ends before that (the folder in use,
say) hands its exit code and its last line back.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

from rich.console import Console

from sequencer.bench.benchrun import Terminated
from sequencer.model.errors import RecipeError, RunError, StoreError
from sequencer.store.runfolder import LOCK_FILE, FolderRefused, read_manifest, unwritable
from sequencer.store.runstatus import holder

SCREEN_FILE = "screen.log"
CHILD_FLAG = "--detached-child"  # hidden: marks the child, which runs in the foreground
POLL_S = 0.05
EXIT_SIGNAL = 130  # as the README's table: stopped by a signal
LOCK_WAIT_S = 300.0  # start-up and a slow disk; far above what a start takes


def add_options(run) -> None:
    run.add_argument("--detach", action="store_true", help=HELP)
    run.add_argument(CHILD_FLAG, action="store_true", help=argparse.SUPPRESS)


HELP = (
    f"run in the background, in a session of its own (screen to RUN_DIR/{SCREEN_FILE}); "
    "follow it with `ccbench status RUN_DIR`"
)


def wanted(args: argparse.Namespace) -> bool:
    """--detach given to the command itself (not the child it starts); refused where a run
    needs its terminal."""
    if not args.detach or args.detached_child:
        return False
    if args.part_by_part:
        raise RecipeError(
            "command line", None, "--detach",
            "cannot be used with --part-by-part: the operator answers at the terminal",
        )  # fmt: skip
    if args.resume and args.out is None:
        raise RecipeError("command line", None, "--resume", "needs --out, the run's folder")
    return True


def start(argv: list[str], out: Path, console: Console, named_out: bool) -> int:
    """Start the child; return 0 once it holds the folder, else its exit code."""
    held = holder(out) if out.is_dir() else None
    if held is not None and held.alive:  # said before anything is written in its folder
        raise FolderRefused(
            out, f"in use by another run (pid {held.pid} on {held.host}); wait for it or "
            f"choose another --out (ccbench status {out})",
        )  # fmt: skip
    try:
        out.mkdir(parents=True, exist_ok=True)
        screen = open(out / SCREEN_FILE, "ab")  # noqa: SIM115 - handed to the child
    except OSError as exc:
        raise unwritable(out, exc) from None
    command = [sys.executable, "-m", "sequencer.cli", *argv, CHILD_FLAG]
    if not named_out:
        command += ["--out", str(out)]
    with screen:
        child = subprocess.Popen(
            command, stdin=subprocess.DEVNULL, stdout=screen, stderr=subprocess.STDOUT,
            start_new_session=True, close_fds=True,
        )  # fmt: skip
    try:
        code = _wait_for_lock(child, out)
    except (KeyboardInterrupt, Terminated) as exc:  # the wait is stopped, not the run
        stopped = RunError(
            f"{exc or 'stopped'} while waiting; the background run (pid {child.pid}) goes on "
            f"without this terminal: ccbench status {out}"
        )
        stopped.exit_code = EXIT_SIGNAL
        raise stopped from None
    if code is not None:
        raise ChildEnded(code, _last_line(out / SCREEN_FILE))
    console.print(
        f"run started in the background (pid {child.pid}); its folder: {out}\n"
        f"its screen: {out / SCREEN_FILE}\n"
        f"follow it: ccbench status {out}",
        soft_wrap=True, highlight=False, markup=False,
    )  # fmt: skip
    return 0


def _wait_for_lock(child: subprocess.Popen[bytes], out: Path) -> int | None:
    """None once the child holds the folder and its run is open there: run.lock names it (it
    writes its pid there after both flocks are taken) and the manifest's last session is its
    own (written after the folder was found fit: not in use, no other run, same recipe).
    The child's exit code if it ends first."""
    deadline = time.monotonic() + LOCK_WAIT_S
    mark = f"pid {child.pid} on "
    while time.monotonic() < deadline:
        code = child.poll()
        if _holder_text(out).startswith(mark) and _session_pid(out) == child.pid:
            return None
        if code is not None:
            return code
        time.sleep(POLL_S)
    raise RunError(
        f"{out}: the background run (pid {child.pid}) has not taken its folder after "
        f"{LOCK_WAIT_S:.0f} s; it may still start: see ccbench status {out}"
    )


def _holder_text(out: Path) -> str:
    try:
        return (out / LOCK_FILE).read_text(encoding="utf-8", errors="replace")
    except OSError:
        return ""


def _session_pid(out: Path) -> int | None:
    try:
        sessions = read_manifest(out).get("sessions") or [{}]
        return int(sessions[-1].get("pid") or 0)
    except (StoreError, ValueError, TypeError, AttributeError):
        return None  # not written yet, or being replaced


def _last_line(path: Path) -> str:
    try:
        text = path.read_bytes()[-4096:].decode("utf-8", errors="replace")
    except OSError:
        return ""
    found = [line for line in text.splitlines() if line.strip()]
    return found[-1] if found else ""


class ChildEnded(RunError):
    """The background run ended before it held its folder: its code and last line."""

    def __init__(self, code: int, line: str) -> None:
        said = line.removeprefix("ccbench: ") or "(it said nothing)"
        super().__init__(f"the background run ended at once (exit {code}): {said}")
        self.exit_code = code if code > 0 else 4
