"""Temperature limits checked before the chamber is touched, and the set-point ramp they allow.

Every recipe set point must lie within the station's lowest..highest; the run moves the set point
no faster than the station's rate (a step the chamber would take at full power could crack a
ceramic package or a solder joint: thermal shock, common practice, no source). Comparisons are
written so that NaN fails them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from sequencer.model.errors import SafetyError
from sequencer.recipe.chamberspec import ChamberSpec
from sequencer.recipe.temperatures import SetPoint


def preflight_temperatures(points: Sequence[SetPoint], chamber: ChamberSpec | None) -> None:
    """Refuse set points the station cannot take, naming the point and the limit."""
    if not points:
        return
    if chamber is None:
        raise SafetyError(
            "temperatures: the recipe asks for set points but the station has no 'chamber:' "
            "entry: add one to the station file, or remove 'temperatures:' from the recipe"
        )
    low, high = chamber.lowest_c, chamber.highest_c
    for index, point in enumerate(points):
        if not (math.isfinite(point.celsius) and low <= point.celsius <= high):
            raise SafetyError(
                f"temperatures[{index}]: set point {point.celsius:g} degC is outside the "
                f"station's chamber range {low:g}..{high:g} degC: change the recipe (or the "
                "station's chamber limits, if the fixture is rated for it)"
            )


def ramp_set_point(now_c: float, target_c: float, rate_k_per_s: float, elapsed_s: float) -> float:
    """The next set point on the way from `now_c` to `target_c` after `elapsed_s` at the rate."""
    if not (rate_k_per_s > 0 and elapsed_s >= 0):
        raise ValueError("the rate must be positive and the time not negative")
    step = rate_k_per_s * elapsed_s
    if abs(target_c - now_c) <= step:
        return target_c
    return now_c + math.copysign(step, target_c - now_c)
