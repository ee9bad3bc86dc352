"""A production plan: from a `figures:` step and the judge section, the few levels the judge
needs instead of a whole sweep. Pure: no I/O.

The judge's figures (sequencer.judge.figures) use, of a sweep, only
- the slope window around VT (ZT, and IP from its line when there are no spot readings) and
  the knee window around VK (ZK): a least-squares line each, at least 3 readings;
- the forward readings that bracket the knee reference (VL), and the point after them;
- the readings programmed at the peak and reverse voltages, when the judge names them;
- all forward sweep readings for the curve's shape (open, short, clamping, scatter, drops).
So a production step reads each window at its edges (a line's slope is best determined by the
readings farthest apart: half the readings at each edge, an odd one at the centre), the peak
and reverse levels once, optional spot repeats at VT, and searches VL on a few levels
(sequencer.plan.kneesearch). Every reading belongs to a segment of kind "sweep" or "spot", so the
judge, the store and `ccbench rejudge` treat it exactly as they treat a full sweep's.
"""

from __future__ import annotations

from sequencer.model.judgesettings import JudgeSettings
from sequencer.plan.kneesearch import KneeSearch
from sequencer.plan.segments import Segment
from sequencer.recipe.figuresstep import FiguresStep

LEVEL_DIGITS = 9


def window_levels(centre_v: float, width_v: float, readings: int) -> list[float]:
    """`readings` levels across a window: half at each edge, an odd one at the centre."""
    low, high = centre_v - width_v / 2, centre_v + width_v / 2
    half = readings // 2
    middle = [centre_v] if readings % 2 else []
    return [low] * half + middle + [high] * half


def fixed_levels(step: FiguresStep, judge: JudgeSettings) -> tuple[float, ...]:
    """The levels every device sees, in ascending order (the reverse level first)."""
    levels = window_levels(judge.knee_voltage_v, judge.knee_window, step.knee_window_readings)
    levels += window_levels(judge.test_voltage_v, judge.slope_window_v, step.test_window_readings)
    for extra in (judge.peak_voltage_v, judge.reverse_voltage_v):
        if extra is not None:
            levels.append(extra)
    return tuple(sorted(round(v, LEVEL_DIGITS) for v in levels))


def knee_search(step: FiguresStep, judge: JudgeSettings) -> KneeSearch:
    """The search's range: from `search_from` up to the knee window's lower edge."""
    high = round(judge.knee_voltage_v - judge.knee_window / 2, LEVEL_DIGITS)
    low = step.search_from_v
    if not low < high:
        raise ValueError(
            f"step '{step.name}': the knee search must start below the knee window "
            f"({high:g} V; got search_from {low:g} V)"
        )
    start = step.typical_limiting_v if step.typical_limiting_v is not None else (low + high) / 2
    return KneeSearch(
        low_v=low,
        high_v=high,
        start_v=min(max(start, low), high),
        resolution_v=step.knee_resolution_v,
        max_points=step.max_search_points,
        test_voltage_v=judge.test_voltage_v,
        slope_window_v=judge.slope_window_v,
        knee_fraction=judge.knee_fraction,
        fixed_reference_a=judge.knee_reference_a(),
    )


def production_segments(step: FiguresStep, judge: JudgeSettings) -> list[Segment]:
    """The step as segments: the fixed readings, spot repeats at VT, then the VL search."""
    args = (step.compliance_a, step.settle_s)
    out = [Segment(step.name, "sweep", fixed_levels(step, judge), *args)]
    if step.repeats:
        levels = (judge.test_voltage_v,) * step.repeats
        out.append(Segment(f"{step.name}-at-vt", "spot", levels, *args))
    search = knee_search(step, judge)
    levels = (search.low_v, search.high_v)  # the range it may read in: what preflight checks
    out.append(Segment(f"{step.name}-knee", "sweep", levels, *args, search=search))
    return out
