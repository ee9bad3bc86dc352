"""A run on an open instrument, from the safe start to the confirmed output-off, and the signals
that may end it.

`SignalGate` turns the first SIGINT, SIGTERM, SIGHUP or SIGQUIT into an exception (so every
`finally` on the way out switches the output off) and holds back any signal that arrives while
the output is being switched off, so that a second Ctrl-C cannot cut the shutdown short.
`on_bench` runs the lot between `start_safe` and `make_safe` and leaves the shutdown report in a
`Bench` for the line the CLI prints.
"""

from __future__ import annotations

import contextlib
import logging
import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, TextIO

from sequencer.bench.lotrun import RunSummary, make_guard
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.safety.rules import Guard, is_hazardous

if TYPE_CHECKING:
    from instruments import Connection
    from sequencer.run.shutdown import Shutdown

log = logging.getLogger(__name__)

# Ctrl-C; `kill`; the terminal closed or the SSH session dropped; Ctrl-\ (POSIX, signal(7))
STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP, signal.SIGQUIT)

# What ccbench says when it could not talk to the instrument at all: it sent nothing that
# switches an output on, but someone else may have left it on.
UNTOUCHED = (
    "ccbench switched nothing on, but could not read the output's state: check it at the instrument"
)
NOTHING_SENT = "nothing was sent to the instrument"


class Terminated(BaseException):
    """SIGTERM, SIGHUP or SIGQUIT, turned into an exception so that every `finally` switches
    the output off; the message names the signal."""


def stopped_by(signum: int) -> BaseException:
    if signum == signal.SIGINT:
        return KeyboardInterrupt("stopped by Ctrl-C")
    return Terminated(f"stopped by {signal.Signals(signum).name}")


@dataclass
class SignalGate:
    """Signal handler for STOP_SIGNALS; install with `installed()` from the main thread."""

    received: list[int] = field(default_factory=list)
    raised: bool = False
    holding: int = 0
    settled: bool = False

    def handler(self, signum: int, frame: object) -> None:
        self.received.append(signum)
        if not self.holding:
            self.release()

    def release(self) -> None:
        """Raise for the first signal received, once; later ones only stay recorded."""
        if self.received and not self.raised and not self.settled:
            self.raised = True
            raise stopped_by(self.received[0])

    def settle(self) -> None:
        """The measuring is over: from now on signals are only recorded, so that nothing can
        cut short the run record, the last line or the exit code."""
        self.settled = True

    @contextmanager
    def held(self) -> Iterator[None]:
        """Signals arriving inside are only recorded; the first one raises when the block ends
        normally (or at once inside a nested `raising()`). When the block ends with an error,
        that error goes on and the signal stays recorded."""
        self.holding += 1
        try:
            yield
        finally:
            self.holding -= 1
        if not self.holding:
            self.release()

    @contextmanager
    def raising(self) -> Iterator[None]:
        """Inside a `held()` block: here a signal raises at once (one already recorded, too)."""
        saved, self.holding = self.holding, 0
        try:
            self.release()
            yield
        finally:
            self.holding = saved

    @contextmanager
    def installed(self, *, ignore_after: bool = False) -> Iterator[SignalGate]:
        """Handle STOP_SIGNALS for the block. A SIGHUP that the parent set to be ignored
        (nohup) stays ignored: the user asked for the run to outlive the terminal. After the
        block the previous handlers come back, or, with `ignore_after` (the program is about
        to exit), the signals are ignored: a storm that goes on after the shutdown then changes
        neither the last line nor the exit code (a Python handler would be reset to the default
        action, which ends the process, while the interpreter shuts down)."""
        self.received.clear()
        self.raised, self.holding, self.settled = False, 0, False
        previous = {signum: signal.getsignal(signum) for signum in STOP_SIGNALS}
        for signum, before in previous.items():
            if not (signum == signal.SIGHUP and before == signal.SIG_IGN):
                signal.signal(signum, self.handler)
        try:
            yield self
        finally:
            for signum, before in previous.items():
                signal.signal(signum, signal.SIG_IGN if ignore_after else before)


GATE = SignalGate()  # the process's one gate; `ccbench` installs it for the whole command


@dataclass
class Bench:
    """What the CLI needs after a run on the bench, however it ended."""

    shutdown: Shutdown | None = None
    guard: Guard | None = None
    connecting: bool = False  # a connection was tried: something may have reached it
    chamber: str = ""  # how the chamber was left (sequencer.bench.temperaturerun), after the SMU

    def ending(self) -> str:
        """How the output (and the chamber, in a run over temperatures) was left, for the last
        line on screen."""
        if self.shutdown is None:
            smu = UNTOUCHED if self.connecting else NOTHING_SENT
        else:
            smu = self.shutdown.describe()
        return f"{smu}; {self.chamber}" if self.chamber else smu

    def may_be_on(self) -> bool:
        """True when ccbench drove the instrument and could not read its output back off."""
        return self.shutdown is not None and not self.shutdown.off


@contextmanager
def exchange_log(path: Path) -> Iterator[TextIO]:
    """scpi.log, opened for the run. Closing it never raises: on a full disk its last buffered
    lines are lost (the driver's spy has said so already), and the error that matters is the
    one that ended the run, not this one."""
    file = open(path, "a", encoding="utf-8")  # noqa: SIM115 - closed below, never raising
    try:
        yield file
    finally:
        try:
            file.close()
        except OSError as exc:
            log.warning("%s: its last lines could not be written (%s)", path, exc.strerror)
            with contextlib.suppress(OSError):
                file.close()  # the buffer is dropped now: the file is closed for good


def on_bench(
    conn: Connection,
    recipe: Recipe,
    plan: Plan,
    measure: Callable[[Guard], RunSummary],
    bench: Bench,
    gate: SignalGate,
    announce: Callable[[str], None],
) -> RunSummary:
    """Safe start, interlock check for a hazardous plan, `measure(guard)`, then the output off
    and read back (reconnecting once if needed).

    Signals are held for the whole of it except inside `measure`, where the first one raises;
    so the safe start and the shutdown always run to their end. Call it inside `gate.held()`
    from the moment the connection is opened.
    """
    # Start-up speed: run.shutdown imports `instruments`, which loads pyvisa.
    from sequencer.run.shutdown import make_safe, require_interlock, start_safe
    from sequencer.run.startnotes import instrument_notes

    guard = bench.guard = make_guard(recipe, conn.smu)
    with gate.held():
        try:
            start_safe(conn.smu)  # the first commands after *IDN?
            announce(f"instrument: {conn.identity} at {conn.resource}")
            for line in instrument_notes(conn.smu):
                announce(line)
            if is_hazardous(plan, recipe.effective_limits):
                require_interlock(conn.smu, plan.peak_voltage_v)
            with gate.raising():
                return measure(guard)
        finally:
            bench.shutdown = make_safe(conn, guard.level_v)
            conn.close()
