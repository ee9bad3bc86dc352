"""Expand a recipe's steps into the concrete levels each device will see. Pure: no I/O.

A `figures:` step (sequencer.plan.production) becomes fixed levels plus a search whose levels are
chosen at run time within a range (`Segment.search`); its estimate counts the readings such a
search usually takes.
"""

from __future__ import annotations

import numpy as np

from sequencer.plan.production import production_segments
from sequencer.plan.segments import Plan, Segment
from sequencer.recipe.figuresstep import FiguresStep
from sequencer.recipe.load import Recipe, SpotStep, SweepStep


def sweep_levels(step: SweepStep) -> tuple[float, ...]:
    levels = np.linspace(step.start_v, step.stop_v, step.points)
    return tuple(float(v) for v in np.round(levels, 12))


def make_plan(recipe: Recipe) -> Plan:
    segments = []
    for step in recipe.steps:
        if isinstance(step, SweepStep):
            levels = sweep_levels(step)
            segments.append(Segment(step.name, "sweep", levels, step.compliance_a, step.settle_s))
        elif isinstance(step, SpotStep):
            levels = (step.voltage_v,) * step.repeats
            segments.append(Segment(step.name, "spot", levels, step.compliance_a, step.settle_s))
        elif isinstance(step, FiguresStep):
            segments += production_segments(step, recipe.judge)
    station = recipe.station
    return Plan(
        tuple(segments), station.channels, recipe.nplc, station.line_frequency_hz, recipe.lists
    )
