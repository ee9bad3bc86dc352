"""What part-by-part testing asks of the operator: a serial, then a part in the socket.

A barcode scanner types like a keyboard: the serial, then Enter. `Scanner` reads one line at a
time from any line source (the terminal, or a script in the tests), strips what scanners add
around a code (spaces, control characters such as STX/ETX) and checks the recipe's pattern.

`InterlockLid` waits for the fixture lid: the part is in when the interlock has read open since
the last test (the old part came out) and reads closed again. On the simulator nobody lifts a
lid, so `SimulatedHands` does it through the simulator's own SIMulation:LID node, one step per
poll, and the wait itself runs exactly as it does on a real fixture. A fixture without an
interlock is confirmed with Enter (`EnterKey`).
"""

from __future__ import annotations

import re
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol

QUIT_WORDS = ("quit", "q")
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")
POLL_S = 0.05  # interlock reads while waiting: fast enough to feel immediate, light on the bus


class Quit(Exception):  # not an error: the operator ends the session
    """The operator asked to stop (the quit word, or the end of the input)."""


@dataclass
class Scanner:
    """Serials from `readline` (returns '' at the end of the input, like a file's readline)."""

    readline: Callable[[], str]
    say: Callable[[str], None]
    pattern: str = ""
    normalise: Callable[[str], str] = str  # the recipe's serial rule (recipe.serials)

    def next_serial(self, prompt: str) -> str:
        """The next valid serial; raises Quit at the quit word or the end of the input."""
        while True:
            self.say(prompt)
            line = self.readline()
            if not line:
                raise Quit("end of input")
            serial = _CONTROL.sub("", line).strip()
            if not serial:
                continue  # a stray Enter, or a scanner's empty read
            if serial.casefold() in QUIT_WORDS:
                raise Quit(serial)
            serial = self.normalise(serial).strip()
            if not serial:
                continue
            problem = self.problem(serial)
            if not problem:
                return serial
            self.say(f"[bold red]refused:[/] {problem}; scan again")

    def problem(self, serial: str) -> str:
        if any(c.isspace() for c in serial):
            return f"{serial!r} holds a space (two codes in one scan?)"
        if self.pattern and not re.fullmatch(self.pattern, serial):
            return f"{serial!r} does not match this recipe's serials ({self.pattern})"
        return ""


class Lid(Protocol):
    def wait_for_part(self, serial: str, socket: int | None) -> None: ...


class Hands(Protocol):
    """Whoever moves the lid: on a real fixture the operator (nothing to do here)."""

    def act(self, closed: bool) -> None: ...


class NoHands:
    def act(self, closed: bool) -> None:
        return None


@dataclass
class SimulatedHands:
    """The operator's hands on the simulator: open a closed lid, close an open one. The part
    inside is the simulated tray device on the channel the part is routed to."""

    write: Callable[[str], None]
    moves: list[str] = field(default_factory=list)

    def act(self, closed: bool) -> None:
        command = "SIM:LID OPEN" if closed else "SIM:LID CLOS"
        self.write(command)
        self.moves.append(command)


@dataclass
class InterlockLid:
    """Waits until the lid has been opened and closed again since the last test."""

    interlock_closed: Callable[[], bool]
    say: Callable[[str], None]
    hands: Hands = field(default_factory=NoHands)
    sleep: Callable[[float], None] = time.sleep
    poll_s: float = POLL_S

    def wait_for_part(self, serial: str, socket: int | None) -> None:
        where = f"into socket {socket}" if socket is not None else "in"
        self.say(f"open the lid, put {serial} {where}, close the lid")
        opened = False
        while True:
            closed = self.interlock_closed()
            opened = opened or not closed
            if closed and opened:
                self.say("lid closed: testing")
                return
            self.hands.act(closed)
            self.sleep(self.poll_s)


@dataclass
class EnterKey:
    """A fixture without an interlock: the operator confirms the part is in with Enter."""

    readline: Callable[[], str]
    say: Callable[[str], None]

    def wait_for_part(self, serial: str, socket: int | None) -> None:
        where = f"into socket {socket}" if socket is not None else "in"
        self.say(f"put {serial} {where}, then press Enter (quit: stop)")
        line = self.readline()
        if not line or line.strip().casefold() in QUIT_WORDS:
            raise Quit("before the test")
