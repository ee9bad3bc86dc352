"""Gauge R&R: the ANOVA method against statsmodels' ANOVA on the same readings, the
average-and-range method against the manual's worked example, and the refusals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf

from sequencer.model.errors import StudyError
from sequencer.study import grr

# AIAG MSA reference manual, 4th ed., the average-and-range worked example: 10 parts,
# appraisers A, B, C, 3 trials. Readings and published results recalled from memory.
AIAG_READINGS = {
    "A": [
        [0.29, -0.56, 1.34, 0.47, -0.80, 0.02, 0.59, -0.31, 2.26, -1.36],
        [0.41, -0.68, 1.17, 0.50, -0.92, -0.11, 0.75, -0.20, 1.99, -1.25],
        [0.64, -0.58, 1.27, 0.64, -0.84, -0.21, 0.66, -0.17, 2.01, -1.31],
    ],
    "B": [
        [0.08, -0.47, 1.19, 0.01, -0.56, -0.20, 0.47, -0.63, 1.80, -1.68],
        [0.25, -1.22, 0.94, 1.03, -1.20, 0.22, 0.55, 0.08, 2.12, -1.62],
        [0.07, -0.68, 1.34, 0.20, -1.28, 0.06, 0.83, -0.34, 2.19, -1.50],
    ],
    "C": [
        [0.04, -1.38, 0.88, 0.14, -1.46, -0.29, 0.02, -0.46, 1.77, -1.49],
        [-0.11, -1.13, 1.09, 0.20, -1.07, -0.67, 0.01, -0.56, 1.45, -1.77],
        [-0.15, -0.96, 0.67, 0.11, -1.45, -0.49, 0.21, -0.49, 1.87, -2.16],
    ],
}


def aiag_table() -> np.ndarray:
    return np.array([AIAG_READINGS[w] for w in "ABC"]).transpose(2, 0, 1)  # part, appraiser, trial


def simulated(
    parts=10, appraisers=3, repeats=3, *, sd_part=1.0, sd_op=0.3, sd_int=0.1, sd_rep=0.2, seed=7
) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (
        rng.normal(0, sd_part, (parts, 1, 1))
        + rng.normal(0, sd_op, (1, appraisers, 1))
        + rng.normal(0, sd_int, (parts, appraisers, 1))
        + rng.normal(0, sd_rep, (parts, appraisers, repeats))
    )


def statsmodels_components(y: np.ndarray) -> dict[str, float]:
    """Variance components from statsmodels' two-way ANOVA mean squares (expected mean squares
    of the random-effects model: Montgomery, Design and Analysis of Experiments, from memory)."""
    p, o, r = y.shape
    frame = pd.DataFrame(
        [(f"p{i}", f"o{j}", y[i, j, k]) for i in range(p) for j in range(o) for k in range(r)],
        columns=["part", "op", "y"],
    )
    table = sm.stats.anova_lm(smf.ols("y ~ C(part) * C(op)", data=frame).fit(), typ=2)
    ms = table["sum_sq"] / table["df"]
    ms_p, ms_o = ms["C(part)"], ms["C(op)"]
    ms_i, ms_e = ms["C(part):C(op)"], ms["Residual"]
    return {
        "repeatability": ms_e,
        "interaction": max((ms_i - ms_e) / r, 0.0),
        "appraiser": max((ms_o - ms_i) / (p * r), 0.0),
        "part": max((ms_p - ms_i) / (o * r), 0.0),
    }


@pytest.mark.reference
@pytest.mark.parametrize("seed", [1, 2, 3])
@pytest.mark.parametrize("shape", [(10, 3, 3), (5, 2, 4), (12, 4, 2)])
def test_variance_components_match_statsmodels_anova(seed, shape):
    y = simulated(*shape, seed=seed)
    ours = grr.variance_components(y, pool=False)
    theirs = statsmodels_components(y)  # source: statsmodels anova_lm on the same readings
    for key, value in theirs.items():
        assert ours[key] == pytest.approx(value, rel=1e-9, abs=1e-12), key


@pytest.mark.reference
def test_anova_table_matches_statsmodels_sums_of_squares():
    y = simulated(seed=11)
    rows = {row.source: row for row in grr.anova_table(y)}
    frame = pd.DataFrame(
        [(i, j, y[i, j, k]) for i in range(10) for j in range(3) for k in range(3)],
        columns=["part", "op", "y"],
    )
    table = sm.stats.anova_lm(smf.ols("y ~ C(part) * C(op)", data=frame).fit(), typ=2)
    for ours, theirs in (
        ("part", "C(part)"),
        ("appraiser", "C(op)"),
        ("part x appraiser", "C(part):C(op)"),
        ("repeatability", "Residual"),
    ):
        assert rows[ours].ss == pytest.approx(table.loc[theirs, "sum_sq"], rel=1e-9)
        assert rows[ours].df == table.loc[theirs, "df"]


@pytest.mark.reference
def test_range_method_reproduces_the_manuals_worked_example():
    # AIAG MSA 4th ed. worked example (from memory): R-double-bar 0.3417, X-diff 0.4447,
    # Rp 3.511; EV 0.20188, AV 0.22963, GRR 0.30575, PV 1.10456, TV 1.14610, %GRR 26.68, ndc 5.
    y = aiag_table()
    assert np.ptp(y, axis=2).mean() == pytest.approx(0.3417, abs=5e-5)
    assert np.ptp(y.mean(axis=(0, 2))) == pytest.approx(0.4447, abs=5e-5)
    assert np.ptp(y.mean(axis=(1, 2))) == pytest.approx(3.511, abs=5e-4)
    study = grr.range_study(y)
    assert study.repeatability == pytest.approx(0.20188, abs=5e-5)
    assert study.reproducibility == pytest.approx(0.22963, abs=5e-5)
    assert study.grr == pytest.approx(0.30575, abs=5e-5)
    assert study.part_to_part == pytest.approx(1.10456, abs=5e-4)
    assert study.total == pytest.approx(1.14610, abs=5e-4)
    assert study.pct_grr_of_total == pytest.approx(26.68, abs=0.01)
    assert study.distinct_categories == 5
    assert study.verdict == "may be acceptable, depending on the use"


def test_k1_is_one_over_the_expected_range_of_normal_samples():
    # d2(m) = integral of 1 - F^m - (1-F)^m over x (Tippett; computed with scipy).
    from scipy import integrate, stats

    for m, k1 in grr.K1.items():
        d2, _ = integrate.quad(
            lambda x, m=m: 1 - stats.norm.cdf(x) ** m - stats.norm.sf(x) ** m, -np.inf, np.inf
        )
        assert k1 == pytest.approx(1 / d2, abs=1e-4)


def test_anova_and_range_methods_agree_roughly_on_the_manuals_data():
    y = aiag_table()
    anova, ranges = grr.anova_study(y), grr.range_study(y)
    assert anova.pct_grr_of_total == pytest.approx(ranges.pct_grr_of_total, abs=3.0)
    assert anova.interaction_pooled  # the interaction is not significant in this example


def test_estimates_fall_near_what_was_set():
    # Many parts and repeats: the estimates approach the set standard deviations.
    y = simulated(60, 8, 6, sd_part=1.0, sd_op=0.3, sd_int=0.0, sd_rep=0.2, seed=5)
    study = grr.anova_study(y)
    assert study.repeatability == pytest.approx(0.2, rel=0.1)
    assert study.part_to_part == pytest.approx(1.0, rel=0.25)
    assert study.reproducibility == pytest.approx(0.3, rel=0.6)


def test_ratios_and_words():
    y = simulated(seed=3)
    study = grr.anova_study(y, tolerance=10.0)
    assert study.pct_grr_of_tolerance == pytest.approx(100 * 6 * study.grr / 10.0)
    assert study.pct_grr_of_total == pytest.approx(100 * study.grr / study.total)
    assert study.total == pytest.approx(np.hypot(study.grr, study.part_to_part))
    assert grr.acceptance(9.9) == "acceptable"
    assert grr.acceptance(10.0).startswith("may be")
    assert grr.acceptance(30.0).startswith("may be")
    assert grr.acceptance(30.1) == "not acceptable"
    assert grr.distinct_categories(1.0, 0.2) == 7  # 1.41 * 5 = 7.05, truncated


def test_records_become_a_balanced_table():
    y = simulated(3, 2, 2)
    records = [(f"p{i}", f"s{j}", y[i, j, k]) for k in range(2) for j in range(2) for i in range(3)]
    table, parts, who = grr.readings_table(records)
    assert parts == ["p0", "p1", "p2"] and who == ["s0", "s1"]
    np.testing.assert_array_equal(table, y)


def test_unbalanced_records_are_refused_naming_the_cell():
    records = [(f"p{i}", f"s{j}", 1.0 + i) for i in range(3) for j in range(2) for _ in range(3)]
    with pytest.raises(StudyError, match=r"unbalanced.*p1/s0 has 2"):
        grr.readings_table([r for n, r in enumerate(records) if n != 6])


@pytest.mark.parametrize(
    ("shape", "words"),
    [((1, 3, 3), "2 parts"), ((10, 1, 3), "2 appraisers"), ((10, 3, 1), "2 repeats")],
)
def test_too_small_a_study_is_refused(shape, words):
    with pytest.raises(StudyError, match=words):
        grr.anova_study(np.ones(shape))


def test_range_method_refuses_sizes_without_constants():
    with pytest.raises(StudyError, match="use the ANOVA method"):
        grr.range_study(simulated(10, 3, 5))


def test_a_reading_that_is_not_a_number_is_refused():
    with pytest.raises(StudyError, match="not a number"):
        grr.readings_table([("p1", "s1", float("nan"))])


def test_component_intervals_cover_the_set_values_about_95_percent_of_the_time():
    # Repeatability's interval is exact; the others are Satterthwaite's approximation.
    truth = {"repeatability": 0.2, "reproducibility": 0.3, "part to part": 1.0}
    covered = dict.fromkeys(truth, 0)
    runs = 200
    for seed in range(runs):
        y = simulated(sd_part=1.0, sd_op=0.3, sd_int=0.0, sd_rep=0.2, seed=1000 + seed)
        for name, low, high in grr.anova_study(y).intervals:
            covered[name] += low <= truth[name] <= high
    for name, n in covered.items():
        assert 0.89 <= n / runs <= 0.99, (name, n)


def test_repeatability_interval_is_the_chi_square_interval():
    from scipy import stats

    y = simulated(seed=21, sd_int=0.3)  # a real interaction: not pooled
    study = grr.anova_study(y)
    assert not study.interaction_pooled
    ss = np.sum((y - y.mean(axis=2, keepdims=True)) ** 2)
    df = 10 * 3 * 2
    low, high = np.sqrt(ss / stats.chi2.ppf([0.975, 0.025], df))  # textbook chi-square interval
    name, got_low, got_high = study.intervals[0]
    assert name == "repeatability"
    assert (got_low, got_high) == pytest.approx((low, high), rel=1e-9)
