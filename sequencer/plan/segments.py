"""A plan as data: segments of concrete levels, each with its compliance and settling, and the
plan's totals (points, peak voltage and power, instrument time). Built by `plan.make`."""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from sequencer.plan.kneesearch import KneeSearch

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
