"""Instrument time: a real clock sleeps for each operation, a virtual one only adds it up.

Both keep `busy_s`, the total time the simulated instrument has spent working (answered by
SIMulation:BUSY?), so a test on the virtual clock can check a timing model without waiting.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Protocol


class Clock(Protocol):
    busy_s: float

    def spend(self, seconds: float) -> None: ...


class VirtualClock:
    """Accumulates busy time; never sleeps."""

    def __init__(self) -> None:
        self.busy_s = 0.0

    def spend(self, seconds: float) -> None:
        self.busy_s += seconds


class RealClock:
    """Accumulates busy time and sleeps that long (sleep is injectable for tests)."""

    def __init__(self, sleep: Callable[[float], None] = time.sleep) -> None:
        self.busy_s = 0.0
        self._sleep = sleep

    def spend(self, seconds: float) -> None:
        self.busy_s += seconds
        self._sleep(seconds)


def make_clock(kind: str) -> Clock:
    """'real' or 'virtual'."""
    return {"real": RealClock, "virtual": VirtualClock}[kind]()
