"""Curve shapes, each with its reason; the knee reference; figures at the peak voltage."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sequencer.judge.engine import judge_curve
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import FigureLimit, JudgeSettings, Shape
from tests.support.textbook import closed_form_vl, curve

GRID = np.arange(0.0, 40.0001, 0.25)
GOOD = curve(GRID, lam=0.01, rs=1000.0)


def _judge(current, settings=None, clamped=None, voltage=None):
    v = GRID if voltage is None else voltage
    c = Curve.from_sweep("t", v, current, in_compliance=clamped)
    if voltage is not None:  # programmed levels stay the grid when the SMU clamps
        c = Curve("t", 0, c.steps, c.kinds, c.segment, GRID, v, c.current_a, c.time_s, clamped)
    return judge_curve(c, settings or JudgeSettings())


def test_a_healthy_noisy_curve_is_ok():
    rng = np.random.default_rng(11)
    j = _judge(GOOD + rng.normal(0, 30e-9, GRID.size))
    assert (j.classification, j.verdict, j.notes) == ("ok", "pass", ())


def test_compliance_limited():
    # A part that wants 6.3 mA (RS 100 ohm) against a 5 mA compliance: from there on the SMU
    # holds 5 mA and reads the voltage the part needs for it (above 1 V: no short).
    want = curve(GRID, lam=0.0, rs=100.0)
    clamped = want >= 5e-3
    first = int(np.argmax(clamped))
    at_limit = float(np.interp(5e-3, want[: first + 1], GRID[: first + 1]))
    assert at_limit > 1.0
    volts = np.where(clamped, at_limit, GRID)
    j = _judge(np.minimum(want, 5e-3), clamped=clamped, voltage=volts)
    assert j.classification == "compliance-limited" and j.verdict == "fail"
    expected = f"compliance-limited: clamped at the compliance from {GRID[first]:g} V (programmed)"
    assert j.reasons[0] == expected
    assert any(r.startswith("regulated current missing") for r in j.reasons)


def test_short_clamps_below_one_volt():
    want = curve(GRID, lam=0.0, rs=0.0)  # 10 mA wanted: 5 mA is reached near 0.9 V
    clamped = want >= 5e-3
    first = int(np.argmax(clamped))
    at_limit = float(np.interp(5e-3, want[: first + 1], GRID[: first + 1]))
    j = _judge(np.minimum(want, 5e-3), clamped=clamped, voltage=np.where(clamped, at_limit, GRID))
    assert j.classification == "short"
    assert j.reasons == (f"short: compliance reached at {at_limit:.3g} V",)
    assert not any(f.known for f in j.figures.values())


def test_non_monotonic():
    dip = GOOD * (1 - 0.1 * np.exp(-(((GRID - 15.0) / 1.0) ** 2)))
    j = _judge(dip)
    assert j.classification == "non-monotonic" and j.verdict == "fail"
    assert j.reasons[0].startswith("non-monotonic: the current falls by")


def test_oscillating():
    wobble = GOOD * (1 + 0.03 * (-1.0) ** np.arange(GRID.size))
    j = _judge(wobble)
    assert j.classification == "oscillating" and j.verdict == "fail"
    assert j.reasons[0].startswith("oscillating: reading scatter")


def test_scatter_limit_is_a_setting():
    wobble = GOOD * (1 + 0.03 * (-1.0) ** np.arange(GRID.size))
    loose = JudgeSettings(shape=Shape(scatter_limit=0.1, drop_limit=0.1))
    assert _judge(wobble, loose).classification == "ok"


def test_incomplete_when_the_sweep_stops_short_of_the_test_voltage():
    v = np.arange(0.0, 20.0001, 0.25)
    j = judge_curve(Curve.from_sweep("t", v, curve(v, lam=0.01)), JudgeSettings())
    assert j.classification == "incomplete" and j.verdict == "fail"
    assert "regulated current missing: the sweep does not cover 25 V" in j.reasons[0]
    assert any(r.startswith("limiting voltage missing") for r in j.reasons)


def test_fixed_knee_current_matches_closed_form():
    # VL at a fixed 1.3 mA; lambda 0: VL = IL RS + g - sqrt(g^2 - IL/BETA), g = |VP| - IL RS
    # [REFERENCES.md s2, closed form]
    flat = curve(GRID, lam=0.0, rs=1000.0)
    j = _judge(flat, JudgeSettings(knee_current_a=1.3e-3))
    expected = closed_form_vl(1.3e-3, 10e-3, -3.0, 1000.0)
    assert j.figures["limiting_voltage"].value == pytest.approx(expected, rel=2e-3)


def test_knee_of_minimum_takes_the_min_limit():
    flat = curve(GRID, lam=0.0, rs=1000.0)
    limits = (FigureLimit("regulated_current", 1.6e-3, 2.0e-3),)
    s = JudgeSettings(knee_of="minimum", limits=limits)
    expected = closed_form_vl(0.8 * 1.6e-3, 10e-3, -3.0, 1000.0)  # [REFERENCES.md s2]
    assert _judge(flat, s).figures["limiting_voltage"].value == pytest.approx(expected, rel=2e-3)


def test_peak_current_and_dissipation():
    s = JudgeSettings(peak_voltage_v=40.0, limits=(FigureLimit("peak_dissipation", None, 70e-3),))
    j = _judge(GOOD, s)
    i_peak = GOOD[-1]
    assert j.figures["peak_current"].value == pytest.approx(i_peak, rel=1e-12)
    assert j.figures["peak_dissipation"].value == pytest.approx(40.0 * i_peak, rel=1e-12)
    u_i = s.accuracy.current.u(i_peak)
    u_p = math.hypot(i_peak * s.accuracy.voltage.u(40.0), 40.0 * u_i)  # u_rel(P)^2 = sum
    assert j.figures["peak_dissipation"].uncertainty == pytest.approx(u_p, rel=1e-9)
    assert j.verdict == "fail"
    assert j.reasons == (f"peak dissipation {40 * i_peak * 1e3:.4g} mW above max 70 mW",)


def test_peak_voltage_not_measured_is_named():
    j = _judge(GOOD, JudgeSettings(peak_voltage_v=60.0))
    assert j.classification == "incomplete"
    assert "peak current missing: nothing was programmed at 60 V" in j.reasons


@pytest.mark.robustness
def test_unreadable_curve_is_incomplete_not_open():
    # Over-range readings everywhere say nothing about the part: not "open", just no figures.
    j = _judge(np.full(GRID.size, np.nan))
    assert j.classification == "incomplete" and j.verdict == "fail"
    at_vt = np.full(3, 25.0)
    spots_only = Curve(
        "s", 0, ("at-vt",), ("spot",), np.zeros(3, int), at_vt, at_vt,
        np.full(3, 1.8e-3), np.zeros(3), np.zeros(3, bool),
    )  # fmt: skip
    j = judge_curve(spots_only, JudgeSettings())
    assert j.figures["regulated_current"].value == pytest.approx(1.8e-3)
    assert "limiting voltage missing: there is no forward sweep" in j.reasons


def test_a_part_going_open_mid_sweep_is_non_monotonic_not_oscillating():
    # The current collapses to noise at 7 V: one event, whatever it does to the scatter estimate.
    rng = np.random.default_rng(5)
    current = np.where(GRID < 7.0, GOOD, 0.0) + rng.normal(0, 10e-12, GRID.size)
    j = _judge(current)
    assert j.classification == "non-monotonic"
    assert j.reasons[0].startswith("non-monotonic: the current falls")
