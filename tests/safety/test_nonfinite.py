"""NaN and infinity at the safety layer itself, whatever the loaders let through: the pre-flight
and the run-time guard refuse a level, compliance or reading that is not a finite number
(`value > limit` is false for NaN, so a comparison written that way passed it)."""

from __future__ import annotations

import math

import pytest

from sequencer.model.errors import SafetyError
from sequencer.plan.segments import Plan, Segment
from sequencer.recipe.limits import Limits, effective_limits
from sequencer.run.segment import Point
from sequencer.safety.rules import Guard, Trip, check_hazard, is_hazardous, preflight

LIMITS = Limits(60.0, 0.02, 0.25)
NAN, INF = math.nan, math.inf


def plan_of(*levels: float, compliance: float = 5e-3, settle: float = 0.0) -> Plan:
    return Plan((Segment("iv", "sweep", levels, compliance, settle),), (1,), 0.1, 50.0)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("plan", "words"),
    [
        (plan_of(0.0, NAN, 40.0), "has a level that is not a finite number (nan V)"),
        (plan_of(NAN), "has a level that is not a finite number"),  # max() of it is NaN
        (plan_of(40.0, NAN), "has a level that is not"),  # max() here is 40: it hid the NaN
        (plan_of(0.0, INF), "has a level that is not a finite number (inf V)"),
        (plan_of(0.0, -INF), "has a level that is not"),
        (plan_of(0.0, 10.0, compliance=NAN), "compliance that is not a finite positive number"),
        (plan_of(0.0, 10.0, compliance=INF), "compliance that is not a finite positive number"),
        (plan_of(0.0, 10.0, settle=NAN), "settling time that is not finite"),
    ],
)
def test_preflight_refuses_non_finite_plans(plan, words):
    with pytest.raises(SafetyError, match=words.replace("(", r"\(").replace(")", r"\)")):
        preflight(plan, LIMITS)


def test_a_nan_level_is_never_touch_safe():
    assert is_hazardous(plan_of(40.0, NAN), LIMITS)
    with pytest.raises(SafetyError, match="declares no interlocked fixture"):
        check_hazard(plan_of(NAN), effective_limits(LIMITS), station="B", interlocked=False,
                     acknowledged=True)  # fmt: skip


def guard() -> Guard:
    return Guard(LIMITS, lambda: True)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("volts", "amps"), [(NAN, 5e-3), (INF, 5e-3), (-INF, 5e-3), (10.0, NAN), (10.0, INF)]
)
def test_the_guard_refuses_a_non_finite_level_before_it_is_sent(volts, amps):
    with pytest.raises(Trip, match="not finite numbers") as info:
        guard().check_level(volts, amps)
    assert info.value.scope == "run"


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("reading", "words"),
    [
        (Point(10.0, NAN, False), "read the current at 10 V as not a number (SCPI NaN, 9.91E37)"),
        (Point(NAN, 1e-3, False), "read the voltage at 10 V as not a number"),
        (Point(10.0, INF, False), "read the current at 10 V as +infinite (SCPI 9.9E37"),
        (Point(-INF, 1e-3, False), "read the voltage at 10 V as -infinite"),
    ],
)
def test_the_guard_stops_the_run_on_a_reading_that_is_not_a_number(reading, words):
    g = guard()
    g.check_level(10.0, 5e-3)
    g.applied(10.0)
    with pytest.raises(Trip) as info:
        g.check_reading("iv", 5e-3, reading)
    assert words in str(info.value) and info.value.scope == "run"


def test_finite_readings_within_the_limits_pass():
    g = guard()
    g.applied(10.0)
    g.check_reading("iv", 5e-3, Point(10.0, 1e-3, False))
