"""Per-device temperature coefficients from stored rows, against numpy's least-squares line
(numpy.polyfit) and the recipe's limits."""

from __future__ import annotations

import numpy as np
import pytest

from sequencer.judge.devicetempco import TempCoLimits, device_tempcos

TEMPS_C = [-20.0, 25.0, 85.0]


def rows(device: str, i25: float, pct_per_k: float, wobble: float = 0.0):
    for k, c in enumerate(TEMPS_C):
        yield device, c, i25 * (1 + pct_per_k / 100 * (c - 25.0)) + wobble * (-1) ** k, 1e-7


def test_coefficients_match_numpy_and_limits_decide():
    data = [*rows("a", 1.8e-3, 0.02, 2e-7), *rows("b", 1.8e-3, -0.3)]
    a, b = device_tempcos(data, TempCoLimits(min_pct_per_k=-0.1, max_pct_per_k=0.1))
    t = np.array(TEMPS_C) + 273.15
    ya = np.array([r[2] for r in rows("a", 1.8e-3, 0.02, 2e-7)])
    slope, _ = np.polyfit(t, ya, 1)  # numpy
    assert a.fit.a_per_k == pytest.approx(slope, rel=1e-9) and a.verdict == "pass"
    assert b.fit.pct_per_k == pytest.approx(-0.3, rel=1e-9)
    assert b.verdict == "fail" and "below its minimum -0.1 %/K" in b.reason


def test_one_temperature_is_not_judged():
    (only,) = device_tempcos([("c", 25.0, 1.8e-3, None)], TempCoLimits(max_pct_per_k=0.1))
    assert only.fit is None and only.verdict == "not judged"
