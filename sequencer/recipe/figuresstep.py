"""The `figures:` step: a production step that measures only the points the judge needs.

Where a `sweep:` step walks the whole I-V curve, a `figures:` step reads each impedance window
at its edges (and centre), the peak and reverse levels the judge section names, and searches
for the limiting voltage on a few points chosen at run time (sequencer.plan.kneesearch). The levels
follow from the recipe's `judge:` section (sequencer.plan.production); the step's settings are read
by the recipe format (sequencer.recipe.format.recipe).

    - figures:
        name: production
        compliance: 5 mA
        settle: 500 us                 # after each level change
        test_window_readings: 4        # readings across the slope window around VT (>= 3)
        knee_window_readings: 3        # ... and across the knee window around VK (>= 3)
        repeats: 0                     # spot readings at VT (0: IP from the window's line)
        knee_resolution: 0.5 V         # the search stops when its bracket is this narrow
        typical_limiting_voltage: 2 V  # where the search starts (default: mid-range)
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from sequencer.model.judgesettings import JudgeSettings
    from sequencer.recipe.yamlsource import Source


@dataclass(frozen=True)
class FiguresStep:
    """A production step's settings (SI floats); the levels come from the judge section."""

    name: str
    compliance_a: float
    settle_s: float
    test_window_readings: int = 3
    knee_window_readings: int = 3
    repeats: int = 0
    knee_resolution_v: float = 0.5
    typical_limiting_v: float | None = None
    search_from_v: float = 0.0
    max_search_points: int = 8
    on_compliance: str = "flag"

    def __post_init__(self) -> None:
        if min(self.test_window_readings, self.knee_window_readings) < 3:
            raise ValueError("a window needs at least 3 readings for its line")
        if self.repeats < 0 or self.max_search_points < 2:
            raise ValueError("repeats must be >= 0 and max_search_points >= 2")
        if not self.knee_resolution_v > 0:
            raise ValueError("knee_resolution_v must be positive")


def check_against_judge(source: Source, steps: tuple[object, ...], judge: JudgeSettings) -> None:
    """A `figures:` step's search must lie below the knee window the judge section sets."""
    edge = judge.knee_voltage_v - judge.knee_window / 2
    for index, step in enumerate(steps):
        if not isinstance(step, FiguresStep):
            continue
        where = f"steps[{index}].figures"
        if not step.search_from_v < edge:
            got = step.search_from_v
            problem = f"must lie below the knee window's lower edge {edge:g} V (got {got:g} V)"
            raise source.error(f"{where}.search_from", problem)
        typical = step.typical_limiting_v
        if typical is not None and not step.search_from_v <= typical <= edge:
            problem = (
                f"must lie between search_from ({step.search_from_v:g} V) and the knee window's "
                f"lower edge ({edge:g} V) (got {typical:g} V)"
            )
            raise source.error(f"{where}.typical_limiting_voltage", problem)
