"""`ccbench check --json`: the plan, the effective limits and the estimate as one JSON document,
from the same objects the tables are drawn from (cli.view, cli.safetyview). Keys: jsonout."""

from __future__ import annotations

from typing import Any

from sequencer.cli.jsonout import number
from sequencer.cli.safetyview import limit_rows
from sequencer.plan.segments import Plan, Segment
from sequencer.recipe.load import Recipe
from sequencer.run.estimate import Estimate
from sequencer.safety.rules import is_hazardous


def check_document(
    recipe: Recipe, plan: Plan, estimate: Estimate | None, warnings: list[str]
) -> dict[str, Any]:
    lim = recipe.effective_limits
    return {
        "valid": True,
        "recipe": recipe.file,
        "product": recipe.product,
        "lot": recipe.lot,
        "station": recipe.station.name,
        "warnings": warnings,
        "plan": _plan(plan),
        "limits": [
            {
                "quantity": r.quantity,
                "unit": r.unit,
                "limit": r.value,
                "set_by": r.set_by,
                "plan_peak": r.plan_peak,
            }
            for r in limit_rows(recipe, plan)
        ],
        "touch_safe": {
            "voltage_V": lim.touch_safe_v,
            "reason": recipe.station.limits.touch_safe_reason or None,
            "exceeded": is_hazardous(plan, lim),
        },
        "estimate": _estimate(plan, estimate),
    }


def _plan(plan: Plan) -> dict[str, Any]:
    return {
        "devices": len(plan.channels),
        "channels": list(plan.channels),
        "points_per_device": plan.points_per_device,
        "aperture_s": plan.aperture_s,
        "peak_voltage_V": number(plan.peak_voltage_v),
        "peak_power_W": number(plan.peak_power_w),
        "steps": [_step(seg) for seg in plan.segments],
    }


def _step(seg: Segment) -> dict[str, Any]:
    searched = seg.search is not None  # levels chosen at run time, within the range given
    return {
        "step": seg.step,
        "kind": "search" if searched else seg.kind,
        "points": seg.expected_points,
        "points_approximate": searched,
        "first_level_V": seg.levels_v[0],
        "last_level_V": seg.levels_v[-1],
        "compliance_A": seg.compliance_a,
        "settle_s": seg.settle_s,
        "peak_power_W": seg.peak_power_w,
    }


def _estimate(plan: Plan, estimate: Estimate | None) -> dict[str, Any]:
    if estimate is None:
        return {"run_s": plan.estimated_seconds(), "per_device_s": plan.seconds_per_device()}
    return {
        "run_s": estimate.seconds,
        "per_device_s": estimate.per_device_s,
        "instrument_per_device_s": estimate.instrument_s,
        "exchanges_per_device_s": estimate.exchanges_s,
        "computer_per_device_s": estimate.device_s,
    }
