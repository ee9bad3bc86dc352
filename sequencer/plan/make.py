"""Expand a recipe's steps into the concrete levels each device will see. Pure: no I/O.

A `figures:` step (sequencer.plan.production) becomes fixed levels plus a search whose levels are
chosen at run time within a range (`Segment.search`); its estimate counts the readings such a
search usually takes.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from sequencer.plan.kneesearch import KneeSearch
from sequencer.recipe.figuresstep import FiguresStep
from sequencer.recipe.load import Recipe, SpotStep, SweepStep

# Instrument-independent cost of one reading beyond aperture and settling: a command and a
# query round trip through the driver (measured on loopback: well under a millisecond).
PER_POINT_OVERHEAD_S = 0.0005
# Fixed cost of one device: channel switch, configuration, ramp down and output off.
PER_DEVICE_OVERHEAD_S = 0.01


@dataclass(frozen=True)
class Segment:
    """One recipe step as levels to apply with one compliance and settling time. A search
    segment (`search` set) reads levels chosen at run time within `levels_v` = (low, high)."""

    step: str
    kind: str
    levels_v: tuple[float, ...]
    compliance_a: float
    settle_s: float
    search: KneeSearch | None = None

    @property
    def expected_points(self) -> int:
        """Readings per device: every level, or what a search usually takes."""
        return self.search.expected_points if self.search else len(self.levels_v)

    @property
    def peak_voltage_v(self) -> float:
        return _peak(abs(v) for v in self.levels_v)

    @property
    def peak_power_w(self) -> float:
        """The most the SMU can deliver in this step: |V| x compliance at the highest level."""
        return self.peak_voltage_v * self.compliance_a


@dataclass(frozen=True)
class Plan:
    segments: tuple[Segment, ...]
    channels: tuple[int, ...]
    nplc: float
    line_frequency_hz: float
    lists: bool = False  # the recipe allows instrument-side lists (where the dialect has them)

    @property
    def points_per_device(self) -> int:
        return sum(s.expected_points for s in self.segments)

    @property
    def peak_voltage_v(self) -> float:
        return _peak(s.peak_voltage_v for s in self.segments)

    @property
    def peak_power_w(self) -> float:
        return max(s.peak_power_w for s in self.segments)

    @property
    def aperture_s(self) -> float:
        return self.nplc / self.line_frequency_hz

    def seconds_per_device(self) -> float:
        """Instrument time per device: every point's settling plus aperture, plus fixed costs."""
        per_point = self.aperture_s + PER_POINT_OVERHEAD_S
        total = sum(s.expected_points * (s.settle_s + per_point) for s in self.segments)
        return total + PER_DEVICE_OVERHEAD_S

    def estimated_seconds(self) -> float:
        return self.seconds_per_device() * len(self.channels)


def _peak(values: Iterable[float]) -> float:
    """The largest value, or NaN if any is NaN (max() keeps or drops a NaN by its position)."""
    found = list(values)
    return math.nan if any(math.isnan(v) for v in found) else max(found)


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
            from sequencer.plan.production import production_segments

            segments += production_segments(step, recipe.judge)
    station = recipe.station
    return Plan(
        tuple(segments), station.channels, recipe.nplc, station.line_frequency_hz, recipe.lists
    )
