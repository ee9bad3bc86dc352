"""A run on an open instrument, from the safe start to the confirmed output-off.

The signals that may end it are caught by the gate in sequencer/bench/signalgate.py (named here
too, where the bench's callers have always found it). `on_bench` runs the lot between
`start_safe` and `make_safe` and leaves the shutdown report in a `Bench` for the line the CLI
prints.
"""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, TextIO

from sequencer.bench.lotrun import RunSummary, make_guard
from sequencer.bench.signalgate import (  # noqa: F401 - named here for the bench's callers
    GATE,
    STOP_SIGNALS,
    SignalGate,
    Terminated,
    stopped_by,
)
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.safety.rules import Guard, is_hazardous

if TYPE_CHECKING:
    from instruments import Connection
    from sequencer.run.shutdown import Shutdown

log = logging.getLogger(__name__)

# What ccbench says when it could not talk to the instrument at all: it sent nothing that
# switches an output on, but someone else may have left it on.
UNTOUCHED = (
    "ccbench switched nothing on, but could not read the output's state: check it at the instrument"
)
NOTHING_SENT = "nothing was sent to the instrument"


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
