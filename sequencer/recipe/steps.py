"""The recipe's measurement steps as the planner takes them: frozen dataclasses of SI floats."""

from __future__ import annotations

from dataclasses import dataclass

from sequencer.recipe.figuresstep import FiguresStep


@dataclass(frozen=True)
class SweepStep:
    name: str
    start_v: float
    stop_v: float
    points: int
    compliance_a: float
    settle_s: float
    on_compliance: str = "flag"  # "trip": this step must not clamp; a hit trips the guard

    def __post_init__(self) -> None:
        if self.points < 2:
            raise ValueError("a sweep needs at least 2 points")


@dataclass(frozen=True)
class SpotStep:
    name: str
    voltage_v: float
    compliance_a: float
    repeats: int
    settle_s: float
    on_compliance: str = "flag"

    def __post_init__(self) -> None:
        if self.repeats < 1:
            raise ValueError("a spot needs at least 1 repeat")


Step = SweepStep | SpotStep | FiguresStep  # figures: the production step (figuresstep.py)
