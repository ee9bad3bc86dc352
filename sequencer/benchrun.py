"""A run on an open instrument, from the safe start to the confirmed output-off, and the signals
that may end it.

`SignalGate` turns the first SIGINT or SIGTERM into an exception (so every `finally` on the way
out switches the output off) and holds back any signal that arrives while the output is being
switched off, so that a second Ctrl-C cannot cut the shutdown short. `on_bench` runs the lot
between `start_safe` and `make_safe` and leaves the shutdown report in a `Bench` for the line the
CLI prints.
"""

from __future__ import annotations

import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from .lotrun import RunSummary, make_guard
from .plan import Plan
from .recipe import Recipe
from .safety import Guard, is_hazardous

if TYPE_CHECKING:
    from instruments import Connection

    from .shutdown import Shutdown


class Terminated(BaseException):
    """SIGTERM, turned into an exception so that every `finally` switches the output off."""


@dataclass
class SignalGate:
    """Signal handler for SIGINT and SIGTERM; install with `install()` from the main thread."""

    received: list[int] = field(default_factory=list)
    raised: bool = False
    holding: int = 0

    def handler(self, signum: int, frame: object) -> None:
        self.received.append(signum)
        if not self.holding:
            self.release()

    def release(self) -> None:
        """Raise for the first signal received, once; later ones only stay recorded."""
        if self.received and not self.raised:
            self.raised = True
            if self.received[0] == signal.SIGTERM:
                raise Terminated("stopped by SIGTERM")
            raise KeyboardInterrupt("stopped by Ctrl-C")

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
    def installed(self) -> Iterator[SignalGate]:
        """Handle SIGINT and SIGTERM for the block; the previous handlers come back after."""
        self.received.clear()
        self.raised, self.holding = False, 0
        previous = {signum: signal.getsignal(signum) for signum in (signal.SIGINT, signal.SIGTERM)}
        for signum in previous:
            signal.signal(signum, self.handler)
        try:
            yield self
        finally:
            for signum, handler in previous.items():
                signal.signal(signum, handler)


GATE = SignalGate()  # the process's one gate; `ccbench` installs it for the whole command


@dataclass
class Bench:
    """What the CLI needs after a run on the bench, however it ended."""

    shutdown: Shutdown | None = None
    guard: Guard | None = None

    def ending(self) -> str:
        """How the output was left, for the last line on screen."""
        if self.shutdown is None:
            return "the output was never switched on"
        return self.shutdown.describe()


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
    from .shutdown import make_safe, require_interlock, start_safe

    guard = bench.guard = make_guard(recipe, conn.smu)
    with gate.held():
        try:
            start_safe(conn.smu)  # the first commands after *IDN?
            announce(f"instrument: {conn.identity} at {conn.resource}")
            if is_hazardous(plan, recipe.effective_limits):
                require_interlock(conn.smu, plan.peak_voltage_v)
            with gate.raising():
                return measure(guard)
        finally:
            bench.shutdown = make_safe(conn, guard.level_v)
            conn.close()
