"""Instrument time: a real clock sleeps for each operation, a virtual one only adds it up.

Both keep `busy_s`, the total time the simulated instrument has spent working (answered by
SIMulation:BUSY?), so a test on the virtual clock can check a timing model without waiting, and
`now_s`, the instrument's own time line (self-heating runs on it).

The real clock subtracts the simulator's own compute time: a program message opens with
`begin()` (the instrument starts working when the message arrives, or when it finishes its
previous work), `spend()` adds modelled time to the message, and `finish()` sleeps until the
message's modelled end. Parsing, solving the device models and the network inside one message
are thus hidden in the modelled time instead of adding to it; only where they take longer than
the model does the simulator run slow. Outside a message, `spend()` sleeps at once.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Protocol


class Clock(Protocol):
    busy_s: float

    @property
    def now_s(self) -> float: ...

    def begin(self) -> None: ...

    def spend(self, seconds: float) -> None: ...

    def finish(self) -> None: ...


class VirtualClock:
    """Accumulates busy time; never sleeps. Its time line is the busy time itself."""

    def __init__(self) -> None:
        self.busy_s = 0.0

    @property
    def now_s(self) -> float:
        return self.busy_s

    def begin(self) -> None:
        pass

    def spend(self, seconds: float) -> None:
        self.busy_s += seconds

    def finish(self) -> None:
        pass


class RealClock:
    """Accumulates busy time and makes it pass in wall-clock time (sleep and now injectable)."""

    def __init__(
        self,
        sleep: Callable[[float], None] = time.sleep,
        now: Callable[[], float] = time.monotonic,
    ) -> None:
        self.busy_s = 0.0
        self._sleep = sleep
        self._now = now
        self._start = now()
        self._due = self._start  # when the work given so far is done
        self._in_message = False

    @property
    def now_s(self) -> float:
        return max(self._due, self._now()) - self._start

    def begin(self) -> None:
        self._due = max(self._due, self._now())
        self._in_message = True

    def spend(self, seconds: float) -> None:
        self.busy_s += seconds
        if self._in_message:
            self._due += seconds
            return
        self._due = max(self._due, self._now()) + seconds
        self._wait()

    def finish(self) -> None:
        self._in_message = False
        self._wait()

    def _wait(self) -> None:
        left = self._due - self._now()
        if left > 0:
            self._sleep(left)


def make_clock(kind: str) -> Clock:
    """'real' or 'virtual'."""
    return {"real": RealClock, "virtual": VirtualClock}[kind]()
