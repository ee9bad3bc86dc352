"""Control charts: factors against the normal range integral, limits from the chosen baseline,
and every Western Electric and Nelson rule firing on its pattern and quiet just short of it."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from sequencer.model.errors import StudyError
from sequencer.study import charts, rules


def fired(values, rule_set):
    found = rules.check_rules(values, 0.0, 1.0, rule_set, lower=-3.0, upper=3.0)
    return {(a.rule, a.index) for a in found}


def names(values, rule_set):
    return {rule for rule, _ in fired(values, rule_set)}


ALTERNATING = [0.5 * (-1) ** i for i in range(14)]
# (rule set, rule, pattern that breaks it (last point completes it), pattern just short of it)
CASES = [
    ("western-electric", "WE1", [0, 0, 3.5], [0, 0, 2.9]),
    ("western-electric", "WE2", [2.5, 0, 2.5], [2.5, 0, -2.5]),
    ("western-electric", "WE3", [1.5, 1.5, 0, 1.5, 1.5], [1.5, 1.5, 0, 0, 1.5]),
    ("western-electric", "WE4", [0.5] * 8, [0.5] * 7 + [-0.5]),
    ("nelson", "N1", [0, 0, -3.5], [0, 0, -2.9]),
    ("nelson", "N2", [-0.5] * 9, [-0.5] * 8 + [0.5]),
    ("nelson", "N3", [0, 0.1, 0.2, 0.3, 0.4, 0.5], [0, 0.1, 0.2, 0.3, 0.4, 0.35]),
    ("nelson", "N4", ALTERNATING, [*ALTERNATING[:13], ALTERNATING[12]]),
    ("nelson", "N5", [-2.5, -2.5, 0], [-2.5, 2.5, 0]),
    ("nelson", "N6", [-1.5, -1.5, -1.5, 0, -1.5], [-1.5, -1.5, 0, 0, -1.5]),
    ("nelson", "N7", [0.1, -0.1] * 7 + [0.1], [0.1, -0.1] * 7 + [1.5]),
    ("nelson", "N8", [1.5, -1.5] * 4, [1.5, -1.5] * 3 + [1.5, 0.5]),
]


@pytest.mark.parametrize(("rule_set", "rule", "breaks", "short"), CASES, ids=[c[1] for c in CASES])
def test_each_rule_fires_on_its_pattern_and_not_short_of_it(rule_set, rule, breaks, short):
    assert (rule, len(breaks) - 1) in fired(breaks, rule_set)
    assert rule not in names(short, rule_set)


def test_every_rule_has_a_case():
    tested = {c[1] for c in CASES}
    assert tested == {r.name for r in rules.WESTERN_ELECTRIC + rules.NELSON}


def test_quiet_noise_raises_nothing_much():
    z = np.random.default_rng(2).normal(0, 1, 50)
    assert len(fired(z, "western-electric")) <= 3  # a false alarm now and then is expected


def test_d2_and_a2_agree_with_the_normal_range_integral():
    # d2(n) = integral of 1 - F^n - (1-F)^n (Tippett 1925); A2 = 3 / (d2 sqrt n) [computed].
    for n, (a2, _, _, d2) in charts.FACTORS.items():
        exact, _ = integrate.quad(
            lambda x, n=n: 1 - stats.norm.cdf(x) ** n - stats.norm.sf(x) ** n, -np.inf, np.inf
        )
        assert d2 == pytest.approx(exact, abs=6e-4)
        assert a2 == pytest.approx(3 / (d2 * np.sqrt(n)), abs=2e-3)


def test_limits_come_from_the_baseline_not_from_the_points_judged():
    rng = np.random.default_rng(4)
    baseline = rng.normal(1.0, 0.01, (25, 5))
    shifted = rng.normal(1.03, 0.01, (10, 5))
    data = np.vstack([baseline, shifted])
    x_chart, r_chart = charts.xbar_r(data, baseline=slice(0, 25))
    assert x_chart.limits.centre == pytest.approx(baseline.mean())
    assert {a.index for a in x_chart.alarms if a.rule == "WE1"} >= set(range(25, 35))
    all_data, _ = charts.xbar_r(data)
    assert all_data.limits.centre == pytest.approx(data.mean())
    assert r_chart.limits.upper == pytest.approx(2.114 * np.ptp(baseline, axis=1).mean())


def test_individuals_chart_sigma_from_moving_range():
    x = np.array([1.0, 1.2, 0.9, 1.1, 1.0, 1.3, 0.8])
    i_chart, mr_chart = charts.individuals(x, baseline=slice(0, 5))
    mr_bar = np.abs(np.diff(x[:5])).mean()
    assert i_chart.limits.sigma == pytest.approx(mr_bar / 1.128)
    assert i_chart.limits.upper == pytest.approx(x[:5].mean() + 3 * mr_bar / 1.128)
    assert mr_chart.limits.upper == pytest.approx(3.267 * mr_bar)
    assert len(mr_chart.values) == len(x) - 1


@pytest.mark.parametrize(
    ("call", "words"),
    [
        (lambda: charts.xbar_r([[1, 2], [1, 2, 3]]), "equal size"),
        (lambda: charts.xbar_r([[1] * 11, [2] * 11]), "2 to 10"),
        (lambda: charts.xbar_r([[1, 2], [2, 3]], baseline=slice(0, 1)), "baseline has 1"),
        (lambda: charts.individuals([1.0, float("nan")]), "finite"),
        (lambda: charts.individuals([1.0, 2.0], rules="house"), "unknown rule set"),
    ],
)
def test_bad_chart_input_is_refused(call, words):
    with pytest.raises(StudyError, match=words):
        call()
