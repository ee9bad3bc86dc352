"""Does the plan measure what the judge will read? Pure: a plan and judge settings in, the
first refusal (field, problem) and any warnings out.

A test or knee voltage outside every forward sweep, or a peak or reverse voltage at no
programmed level, makes every device fail for a missing figure; a compliance at or below a
current limit makes every device clamp there. `ccbench check` says so before anything runs.
"""

from __future__ import annotations

from sequencer.model.judgesettings import JudgeSettings
from sequencer.model.units import format_si
from sequencer.plan.segments import Plan

MATCH_V = 1e-3  # the judge's own tolerance for a reading to belong to a level


def _sweep_span(plan: Plan) -> tuple[float, float] | None:
    levels = [v for s in plan.segments if s.kind == "sweep" for v in s.levels_v if v >= 0]
    return (min(levels), max(levels)) if levels else None


def _programmed(plan: Plan, volts: float) -> bool:
    return any(abs(v - volts) <= MATCH_V for s in plan.segments for v in s.levels_v)


def unmeasured(plan: Plan, s: JudgeSettings) -> tuple[str, str] | None:
    """(field, problem) for the first figure voltage the plan does not measure; None if all are."""
    span = _sweep_span(plan)
    shown = "no forward sweep" if span is None else f"the sweep covers {span[0]:g} to {span[1]:g} V"
    for name, volts in (("test_voltage", s.test_voltage_v), ("knee_voltage", s.knee_voltage_v)):
        inside = span is not None and span[0] - MATCH_V <= volts <= span[1] + MATCH_V
        if not inside:
            return (
                f"judge.{name}",
                f"{volts:g} V is not measured ({shown}); move it or widen the sweep",
            )
    for name, volts in (
        ("peak_voltage", s.peak_voltage_v),
        ("reverse_voltage", s.reverse_voltage_v),
    ):
        if volts is not None and not _programmed(plan, volts):
            return f"judge.{name}", f"{volts:g} V is at no programmed level; add it to a step"
    return None


def clamping(plan: Plan, s: JudgeSettings) -> list[str]:
    """Warnings: forward steps whose compliance is at or below a regulated-current limit."""
    limit = s.limit("regulated_current")
    bounds = [b for b in (limit.max, limit.min) if b is not None]
    if not bounds:
        return []
    top = max(bounds)
    return [
        f"step '{seg.step}' compliance {format_si(seg.compliance_a, 'A')} is at or below the "
        f"regulated current limit {format_si(top, 'A')}: devices will clamp there"
        for seg in plan.segments
        if any(v > 0 for v in seg.levels_v) and seg.compliance_a <= top
    ]
