"""The effective limits as `ccbench check` shows them: each quantity, its value, which layer set
it (station, recipe or device ratings), and what the plan asks of it."""

from __future__ import annotations

from dataclasses import dataclass

from rich.table import Table

from sequencer.model.units import format_si
from sequencer.plan.segments import Plan
from sequencer.recipe.limits import Bound
from sequencer.recipe.load import Recipe
from sequencer.safety.rules import is_hazardous

LAYER = {
    "station": "station",
    "recipe": "recipe",
    "peak operating voltage": "ratings (POV)",
    "dissipation": "ratings (PD)",
}


def _layer(bound: Bound) -> str:
    return LAYER.get(bound.source, bound.source)


@dataclass(frozen=True)
class LimitRow:
    """One effective limit: what it limits, its SI value and unit, who set it, the plan's peak."""

    quantity: str
    value: float
    unit: str
    set_by: str
    plan_peak: float


def limit_rows(recipe: Recipe, plan: Plan) -> list[LimitRow]:
    """The effective limits with what the plan asks of each (the table and --json say the same)."""
    lim = recipe.effective_limits
    device_peak = max(lim.device_power_w(s.peak_voltage_v, s.compliance_a) for s in plan.segments)
    rows = [
        ("voltage", lim.voltage, "V", plan.peak_voltage_v),
        ("compliance", lim.current, "A", max(s.compliance_a for s in plan.segments)),
        ("V x compliance", lim.power, "W", plan.peak_power_w),
    ]
    if lim.dissipation is not None:
        rows.append(("dissipation", lim.dissipation, "W", device_peak))
    return [LimitRow(name, b.value, unit, _layer(b), peak) for name, b, unit, peak in rows]


def limits_table(recipe: Recipe, plan: Plan) -> Table:
    lim = recipe.effective_limits
    table = Table(title="Effective limits (smallest of station, recipe, ratings)")
    table.title_justify = "left"
    for column in ("quantity", "limit", "set by", "plan peak"):
        table.add_column(column)
    for r in limit_rows(recipe, plan):
        table.add_row(
            r.quantity, format_si(r.value, r.unit), r.set_by, format_si(r.plan_peak, r.unit)
        )
    hazardous = is_hazardous(plan, lim)
    reason = recipe.station.limits.touch_safe_reason
    table.add_row(
        "touch-safe voltage",
        format_si(lim.touch_safe_v, "V"),
        f"station: {reason}" if reason else "station",
        "above: interlock + ack" if hazardous else "not exceeded",
    )
    return table
