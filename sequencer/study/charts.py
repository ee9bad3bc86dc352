"""Control charts: X-bar/R (subgroups) and individuals/moving range, with limits computed from a
baseline the user chooses (never from the points being judged), and the run rules.

Constants: Montgomery, Introduction to Statistical Quality Control, appendix table of factors for
control charts (values from memory; d2 is checked against the normal range integral in the tests).
Pure numpy.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from sequencer.model.errors import StudyError
from sequencer.study.rules import RULE_SETS, Alarm, check_rules

# Subgroup size n -> (A2, D3, D4, d2) (Montgomery, appendix VI; from memory).
FACTORS = {
    2: (1.880, 0.0, 3.267, 1.128),
    3: (1.023, 0.0, 2.574, 1.693),
    4: (0.729, 0.0, 2.282, 2.059),
    5: (0.577, 0.0, 2.114, 2.326),
    6: (0.483, 0.0, 2.004, 2.534),
    7: (0.419, 0.076, 1.924, 2.704),
    8: (0.373, 0.136, 1.864, 2.847),
    9: (0.337, 0.184, 1.816, 2.970),
    10: (0.308, 0.223, 1.777, 3.078),
}
MIN_BASELINE = 2  # subgroups (or points) needed to compute any limit at all


@dataclass(frozen=True, kw_only=True)
class Limits:
    centre: float
    sigma: float  # of the plotted statistic
    lower: float
    upper: float


@dataclass(frozen=True, kw_only=True)
class Chart:
    kind: str  # "x-bar", "range", "individuals", "moving range"
    values: tuple[float, ...]
    limits: Limits
    alarms: tuple[Alarm, ...]


def xbar_r(
    subgroups: ArrayLike, baseline: slice | None = None, rules: str = "western-electric"
) -> tuple[Chart, Chart]:
    """Subgroups as rows of equal size; limits from the rows in `baseline` (all rows if None)."""
    data = _rows(subgroups)
    n = data.shape[1]
    if n not in FACTORS:
        raise StudyError(f"X-bar/R charts need subgroups of 2 to 10 readings (got {n})")
    a2, d3, d4, _ = FACTORS[n]
    base = _baseline(data, baseline)
    means, ranges = data.mean(axis=1), np.ptp(data, axis=1)
    x_bar, r_bar = base.mean(), np.ptp(base, axis=1).mean()
    x_limits = Limits(
        centre=x_bar, sigma=a2 * r_bar / 3, lower=x_bar - a2 * r_bar, upper=x_bar + a2 * r_bar
    )
    r_limits = Limits(centre=r_bar, sigma=(d4 - 1) * r_bar / 3, lower=d3 * r_bar, upper=d4 * r_bar)
    return (
        _chart("x-bar", means, x_limits, rules),
        _chart("range", ranges, r_limits, "beyond-limits"),
    )


def individuals(
    values: ArrayLike, baseline: slice | None = None, rules: str = "western-electric"
) -> tuple[Chart, Chart]:
    """Individual readings; sigma from the mean moving range of the baseline over d2(2)."""
    x = np.asarray(values, dtype=float)
    if x.ndim != 1 or not np.all(np.isfinite(x)):
        raise StudyError("an individuals chart needs a list of finite readings")
    base = x[baseline] if baseline is not None else x
    if len(base) < MIN_BASELINE:
        raise StudyError(
            f"the baseline has {len(base)} readings; at least {MIN_BASELINE} are needed (common "
            "practice is 20 or more)"
        )
    mr_bar = np.abs(np.diff(base)).mean()
    _, _, d4, d2 = FACTORS[2]
    centre, sigma = base.mean(), mr_bar / d2
    x_limits = Limits(
        centre=centre, sigma=sigma, lower=centre - 3 * sigma, upper=centre + 3 * sigma
    )
    mr_limits = Limits(centre=mr_bar, sigma=(d4 - 1) * mr_bar / 3, lower=0.0, upper=d4 * mr_bar)
    moving = np.abs(np.diff(x))
    return (
        _chart("individuals", x, x_limits, rules),
        _chart("moving range", moving, mr_limits, "beyond-limits"),
    )


def _rows(subgroups: ArrayLike) -> np.ndarray:
    try:
        data = np.asarray(subgroups, dtype=float)
    except ValueError:
        raise StudyError("X-bar/R charts need subgroups of equal size") from None
    if data.ndim != 2:
        raise StudyError("X-bar/R charts need subgroups of equal size")
    if not np.all(np.isfinite(data)):
        raise StudyError("a subgroup includes a reading that is not a number")
    return data


def _baseline(data: np.ndarray, baseline: slice | None) -> np.ndarray:
    base = data[baseline] if baseline is not None else data
    if len(base) < MIN_BASELINE:
        raise StudyError(
            f"the baseline has {len(base)} subgroups; at least {MIN_BASELINE} are needed (common "
            "practice is 20 to 25)"
        )
    return base


def _chart(kind: str, values: np.ndarray, limits: Limits, rules: str) -> Chart:
    if rules not in RULE_SETS:
        raise StudyError(f"unknown rule set {rules!r}: choose one of {', '.join(RULE_SETS)}")
    alarms = check_rules(
        values, limits.centre, limits.sigma, rules, lower=limits.lower, upper=limits.upper
    )
    return Chart(kind=kind, values=tuple(float(v) for v in values), limits=limits, alarms=alarms)
