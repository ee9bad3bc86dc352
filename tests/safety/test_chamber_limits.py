"""Set points against the station's chamber range before anything is touched, and the ramp that
keeps a set-point change within the station's rate."""

from __future__ import annotations

import math

import pytest

from sequencer.model.errors import SafetyError
from sequencer.recipe.chamberspec import ChamberSpec
from sequencer.recipe.temperatures import SetPoint
from sequencer.safety.chamber import preflight_temperatures, ramp_set_point

SPEC = ChamberSpec(
    resource="sim", dialect="chamber_text", timeout_s=2.0, lowest_c=-40.0, highest_c=125.0,
    rate_k_per_s=0.1, safe_c=25.0,
)  # fmt: skip


def test_set_points_within_the_range_pass_and_outside_are_named():
    preflight_temperatures([SetPoint(celsius=-40.0), SetPoint(celsius=125.0)], SPEC)
    with pytest.raises(SafetyError, match=r"temperatures\[1\]: set point 150 degC .* -40\.\.125"):
        preflight_temperatures([SetPoint(celsius=25.0), SetPoint(celsius=150.0)], SPEC)
    with pytest.raises(SafetyError, match=r"temperatures\[0\]"):
        preflight_temperatures([SetPoint(celsius=math.nan)], SPEC)


def test_set_points_without_a_chamber_are_refused():
    preflight_temperatures([], None)
    with pytest.raises(SafetyError, match="no 'chamber:' entry"):
        preflight_temperatures([SetPoint(celsius=25.0)], None)


def test_the_ramp_moves_no_faster_than_the_rate_and_stops_at_the_target():
    assert ramp_set_point(25.0, 85.0, 0.1, 60.0) == pytest.approx(31.0)
    assert ramp_set_point(25.0, -20.0, 0.1, 60.0) == pytest.approx(19.0)
    assert ramp_set_point(84.0, 85.0, 0.1, 60.0) == 85.0
    with pytest.raises(ValueError):
        ramp_set_point(25.0, 85.0, 0.0, 1.0)
