"""The stop signals of a run: the first SIGINT, SIGTERM, SIGHUP or SIGQUIT becomes an exception
(so every `finally` on the way out switches the output off); any signal that arrives while the
output is being switched off is held back, so that a second Ctrl-C cannot cut the shutdown short.

Apart from the bench (only the standard library), so that `ccbench` can install the gate for
every command without loading what a run needs.
"""

from __future__ import annotations

import signal
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field

# Ctrl-C; `kill`; the terminal closed or the SSH session dropped; Ctrl-\ (POSIX, signal(7))
STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP, signal.SIGQUIT)


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
