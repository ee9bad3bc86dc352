"""The temperature-coefficient fit against scipy.stats.linregress (slope and its standard error)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import linregress

from sequencer.judge.tempco import fit_tempco, zero_tc_value


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_slope_and_uncertainty_match_scipy(seed):
    rng = np.random.default_rng(seed)
    temps = np.array([253.15, 273.15, 298.15, 323.15, 358.15])
    currents = 1.8e-3 + 4e-6 * (temps - 298.15) + rng.normal(0, 2e-7, temps.size)
    fitted = fit_tempco(temps, currents)
    ref = linregress(temps, currents)  # scipy
    assert fitted.a_per_k == pytest.approx(ref.slope, rel=1e-9)
    assert fitted.u_a_per_k == pytest.approx(ref.stderr, rel=1e-9)
    assert fitted.value_at_ref == pytest.approx(ref.intercept + ref.slope * 298.15, rel=1e-12)
    assert fitted.pct_per_k == pytest.approx(100 * ref.slope / fitted.value_at_ref, rel=1e-12)


def test_two_temperatures_carry_the_readings_uncertainty():
    fitted = fit_tempco([273.15, 323.15], [1.0e-3, 1.1e-3], u_values=[1e-6, 1e-6])
    assert fitted.a_per_k == pytest.approx(2e-6)
    assert fitted.u_a_per_k == pytest.approx(math.sqrt(2) * 1e-6 / 50.0)  # u of a difference / dT
    assert math.isnan(fit_tempco([273.15, 323.15], [1.0e-3, 1.1e-3]).u_a_per_k)


def test_one_temperature_is_refused():
    with pytest.raises(ValueError, match="two or more temperatures"):
        fit_tempco([298.15, 298.15], [1e-3, 1e-3])


def test_zero_coefficient_is_interpolated_only_when_bracketed():
    assert zero_tc_value([1e-3, 2e-3, 3e-3], [2.0, -2.0, -4.0]) == pytest.approx(1.5e-3)
    assert zero_tc_value([3e-3, 1e-3], [-1.0, 1.0]) == pytest.approx(2e-3)  # order does not matter
    assert zero_tc_value([1e-3, 2e-3], [1.0, 3.0]) is None
