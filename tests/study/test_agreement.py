"""Station-to-station agreement: Deming / orthogonal regression against scipy.odr, the
jackknife intervals cover what was set, Bland-Altman limits, the verdict and the refusals."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from sequencer.model.errors import StudyError
from sequencer.study import agreement


def pairs(n=30, *, offset=0.0, slope=1.0, sd=0.01, seed=3):
    rng = np.random.default_rng(seed)
    true = rng.uniform(1.0, 5.0, n)
    return true + rng.normal(0, sd, n), offset + slope * true + rng.normal(0, sd, n)


def odr_fit(x, y, error_ratio):
    """scipy.odr with weights 1/variance on each axis (source: scipy.odr, ODRPACK)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # scipy.odr is on its way out
        from scipy import odr
    data = odr.RealData(x, y, sx=1.0, sy=np.sqrt(error_ratio))
    out = odr.ODR(data, odr.unilinear, beta0=[1.0, 0.0]).run()
    return out.beta  # slope, intercept


@pytest.mark.reference
@pytest.mark.parametrize("error_ratio", [1.0, 0.25, 4.0])
@pytest.mark.parametrize("seed", [1, 2])
def test_deming_matches_scipy_odr(error_ratio, seed):
    x, y = pairs(offset=0.05, slope=1.02, sd=0.05, seed=seed)
    slope, intercept = agreement.deming(x, y, error_ratio)
    odr_slope, odr_intercept = odr_fit(x, y, error_ratio)
    assert slope == pytest.approx(odr_slope, rel=1e-6)
    assert intercept == pytest.approx(odr_intercept, abs=1e-6)


def test_deming_slope_is_not_pulled_towards_zero_like_least_squares():
    rng = np.random.default_rng(9)
    true = rng.uniform(0, 1, 400)
    x, y = true + rng.normal(0, 0.1, 400), true + rng.normal(0, 0.1, 400)
    assert agreement.deming(x, y)[0] == pytest.approx(1.0, abs=0.05)
    assert np.polyfit(x, y, 1)[0] < 0.93  # least squares is biased by the error on x


def test_intervals_cover_the_offset_that_was_set_most_of_the_time():
    covered = 0
    for seed in range(200):
        x, y = pairs(n=25, offset=0.02, slope=1.0, sd=0.01, seed=seed)
        result = agreement.compare(x, y)
        covered += result.offset.contains(0.02) and result.slope.contains(1.0)
    assert covered >= 170  # about 95 % of each, both together about 90 %


def test_bland_altman_limits():
    x, y = pairs(n=40, offset=0.03, sd=0.01, seed=4)
    result = agreement.compare(x, y, tolerance=0.1)
    d = y - x
    assert result.bias.value == pytest.approx(d.mean())
    assert result.upper_limit == pytest.approx(d.mean() + 1.96 * d.std(ddof=1))
    assert result.lower_limit == pytest.approx(d.mean() - 1.96 * d.std(ddof=1))


def test_verdict_against_a_tolerance():
    x, y = pairs(n=40, offset=0.03, sd=0.01, seed=4)
    assert agreement.compare(x, y, tolerance=0.1).verdict.startswith("agree within +/-0.1")
    said = agreement.compare(x, y, tolerance=0.02).verdict
    assert said.startswith("do not agree") and "constant offset" in said
    x, y = pairs(n=40, slope=1.05, sd=0.001, seed=4)
    assert "proportional" in agreement.compare(x, y, tolerance=1.0).verdict
    x, y = pairs(n=40, sd=0.01, seed=4)
    assert agreement.compare(x, y, tolerance=0.1).verdict == "agree within +/-0.1"


@pytest.mark.parametrize(
    ("x", "y", "words"),
    [
        ([1, 2, 3, 4], [1, 2, 3, 4], "at least 5 parts"),
        ([1, 2, 3, 4, 5, 6], [1, 2, 3, 4, 5], "same parts"),
        ([1, 2, 3, 4, float("nan")], [1, 2, 3, 4, 5], "not a number"),
        ([1, 1, 1, 1, 1], [1, 2, 3, 4, 5], "do not vary together"),
    ],
)
def test_bad_comparisons_are_refused(x, y, words):
    with pytest.raises(StudyError, match=words):
        agreement.compare(x, y)
