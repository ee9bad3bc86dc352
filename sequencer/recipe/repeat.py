"""Repeated rounds over the tray, as a recipe or the command line asks for them.

    repeat: {every: 10 min, for: 8 h}     a round every 10 minutes, for 8 hours from the start
    repeat: {every: 10 min}               ... until the run is stopped (Ctrl-C or SIGTERM)
    repeat: {every: 0 s, rounds: 3}       three rounds, one straight after the other

`every` counts from the start of one round to the start of the next; a round that takes longer
is followed at once by the next. `for` is measured from the run's first start (a resumed run
keeps its end time); a round begun before the end is measured to its last device. With both
`for` and `rounds`, whichever comes first ends the run. (A round was called a pass before
schema 8; the word now belongs to the verdict alone.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from sequencer.model.errors import RecipeError
from sequencer.model.units import format_si
from sequencer.recipe.units import UnitProblem, parse_quantity


@dataclass(frozen=True)
class Repeat:
    every_s: float
    for_s: float | None = None
    rounds: int | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.every_s) and self.every_s >= 0):
            raise ValueError(f"every must be 0 s or more (got {self.every_s} s)")
        if self.for_s is not None and not self.for_s > 0:
            raise ValueError(f"for must be positive (got {self.for_s} s)")
        if self.rounds is not None and self.rounds < 1:
            raise ValueError(f"rounds must be 1 or more (got {self.rounds})")

    @property
    def until_stopped(self) -> bool:
        return self.for_s is None and self.rounds is None

    def describe(self) -> str:
        every = f"a round every {_duration(self.every_s)}"
        parts = [every if self.every_s else "one round straight after another"]
        if self.for_s is not None:
            parts.append(f"for {_duration(self.for_s)}")
        if self.rounds is not None:
            parts.append(f"at most {self.rounds} rounds")
        if self.until_stopped:
            parts.append("until stopped (Ctrl-C or SIGTERM)")
        return ", ".join(parts)

    def as_dict(self) -> dict[str, Any]:
        return {"every_s": self.every_s, "for_s": self.for_s, "rounds": self.rounds}


def _duration(seconds: float) -> str:
    if seconds == 0:
        return "0 s"
    for unit, size in (("h", 3600.0), ("min", 60.0)):
        if seconds >= size and (seconds / size) == round(seconds / size, 3):
            return f"{seconds / size:g} {unit}"
    return format_si(seconds, "s")


def repeat_from_options(
    every: str | None, for_: str | None, rounds: int | None, recipe: Repeat | None
) -> Repeat | None:
    """The command line's --every / --for / --rounds, which replace the recipe's `repeat`."""
    if every is None and for_ is None and rounds is None:
        return recipe
    if every is None and for_ is not None:
        raise RecipeError("command line", None, "--for", "needs --every as well")
    every_s = _option("--every", every) if every is not None else 0.0
    for_s = _option("--for", for_) if for_ is not None else None
    try:
        return Repeat(every_s, for_s, rounds)
    except ValueError as exc:
        raise RecipeError("command line", None, "", str(exc)) from None


def _option(name: str, text: str) -> float:
    try:
        return parse_quantity(text, "time")
    except UnitProblem as exc:
        raise RecipeError("command line", None, name, str(exc)) from None
