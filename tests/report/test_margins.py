"""Margins a test engineer reads at a glance: a share of the tolerance band where there are two
limits, of the one limit otherwise, and a ratio far above a minimum (never "808 %")."""

from __future__ import annotations

import numpy as np
import pytest

from sequencer.model.judgesettings import FigureLimit
from sequencer.report.margins import margin_scale, margin_text, margins


def one(value: float, limit: FigureLimit, at_least: bool = False) -> float:
    return float(margins(np.array([value]), np.array([at_least]), limit)[0])


def test_two_limits_give_a_share_of_the_band():
    limit = FigureLimit("regulated_current", 1.62e-3, 1.98e-3)
    assert margin_scale(limit) == "band"
    assert one(1.80e-3, limit) == pytest.approx(0.5)  # the middle of the band
    assert one(1.71e-3, limit) == pytest.approx(0.25)
    assert margin_text(one(1.71e-3, limit), limit) == "+25 % band"
    assert one(1.58e-3, limit) == pytest.approx(-0.04 / 0.36)  # below the minimum
    assert margin_text(one(1.58e-3, limit), limit) == "-11 % band"


def test_a_value_far_above_its_minimum_is_a_ratio_not_hundreds_of_percent():
    limit = FigureLimit("knee_impedance", 20e3, None)
    m = one(181.6e3, limit)  # the demo's worst ZK: it was shown as "808 %"
    assert margin_text(m, limit) == "9.1 x min"
    assert "%" not in margin_text(m, limit)
    assert margin_text(one(26e3, limit), limit) == "+30 % min"
    assert margin_text(one(19e3, limit), limit) == "-5.0 % min"


def test_a_maximum_only_is_a_share_of_the_maximum():
    limit = FigureLimit("limiting_voltage", None, 3.5)
    assert margin_text(one(2.156, limit), limit) == "+38 % max"
    assert margin_text(one(3.6, limit), limit) == "-2.9 % max"


def test_a_lower_bound_has_no_margin_to_a_maximum_and_no_limit_none():
    limit = FigureLimit("dynamic_impedance", 100e3, 1e6)
    assert one(5e6, limit, at_least=True) == pytest.approx((5e6 - 100e3) / 900e3)
    assert margin_text(float("nan"), FigureLimit("peak_current")) == "—"
    assert np.isnan(one(1.0, FigureLimit("peak_current")))


def test_no_sane_figure_shows_hundreds_of_percent():
    """Any value inside two limits stays within 0 to 50 % of the band; any value up to 2 x a
    lone minimum within 100 %; beyond, a ratio."""
    band = FigureLimit("regulated_current", 1.0, 2.0)
    floor = FigureLimit("knee_impedance", 1.0, None)
    for value in np.linspace(1.0, 2.0, 21):
        assert 0 <= one(value, band) <= 0.5
    for value in np.geomspace(1.0, 1000.0, 31):
        text = margin_text(one(value, floor), floor)
        assert text.endswith("x min") or float(text.split(" %")[0]) <= 100
