"""The expanded uncertainty U covers the true value with the stated probability: a Monte Carlo
check [src: JCGM 101:2008 (GUM Supplement 1)] over device kinds, grids and noise levels (see
tests/reference/coverage_mc.py for the model and the true values).

With 1,000 independent trials and a true coverage of 95 %, the covered fraction lies in the
binomial 99 % band [0.931, 0.967] [src: scipy.stats.binom.interval(0.99, 1000, 0.95)], checked
below rather than typed in. Each condition has its own seed, so the trials are independent of
every other condition's.
"""

from __future__ import annotations

import pytest

from tests.reference.coverage_mc import band, conditions, coverage

TRIALS = 1000
LOW, HIGH = band(TRIALS)
CONDITIONS = conditions()
# Where the instrument's rectangular slope error dominates a 9 mA part's low-noise fit, u is far
# from Gaussian: t(nu_eff) over-covers (0.25 V grid) or, with a 3-point window and nu_eff near 1,
# Welch-Satterthwaite under-covers (1 V grid). Open (issue 18): a coverage interval from the
# distribution itself (JCGM 101 7.7) instead of k.
NOT_GAUSSIAN = {
    "jfet 47R (9 mA)    grid 0.25 V noise  30 nA",
    "jfet 47R (9 mA)    grid 1.00 V noise  30 nA",
}


def _case(index: int):
    label = CONDITIONS[index].label()
    marks = pytest.mark.xfail(reason="u not Gaussian", strict=True) if label in NOT_GAUSSIAN else ()
    return pytest.param(index, id=label, marks=marks)


def test_the_band_is_the_binomial_99_percent_interval():
    assert pytest.approx((0.931, 0.967), abs=5e-4) == (LOW, HIGH)


@pytest.mark.reference
@pytest.mark.parametrize("index", [_case(i) for i in range(len(CONDITIONS))])
def test_impedances_are_covered_within_the_binomial_band(index):
    got = coverage(CONDITIONS[index], TRIALS, seed=1 + index)
    for name in ("dynamic_impedance", "knee_impedance"):
        assert LOW <= got[name] <= HIGH, (name, got[name])


@pytest.mark.reference
@pytest.mark.xfail(
    reason="IP and VL are dominated by the instrument's accuracy limit, read as one rectangular "
    "distribution: k = t(nu_eff) of a Gaussian over-covers it (about 100 %); VL on a 1 V grid "
    "for a 0.3 mA part carries an interpolation bias its u does not cover. Issue 18, open.",
    strict=True,
)
def test_ip_and_vl_are_covered_within_the_binomial_band():
    outside = []
    for index, c in enumerate(CONDITIONS):
        got = coverage(c, TRIALS, seed=1 + index)
        for name in ("regulated_current", "limiting_voltage"):
            if not LOW <= got[name] <= HIGH:
                outside.append((c.label(), name, got[name]))
    assert not outside, outside
