"""Run rules for control charts: each rule looks at a window of consecutive points, in units of
the chart's sigma from its centre line, and flags the last point of every window that breaks it.

Western Electric rules: Western Electric, Statistical Quality Control Handbook (1956); Nelson's
eight: L. S. Nelson, Journal of Quality Technology 16 (1984); both as listed by Montgomery,
Introduction to Statistical Quality Control (rule wording and window sizes from memory).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike


@dataclass(frozen=True, kw_only=True)
class Alarm:
    rule: str
    index: int  # the point that completes the pattern
    text: str


@dataclass(frozen=True, kw_only=True)
class Rule:
    name: str
    text: str
    window: int
    broken: Callable[[np.ndarray], bool]  # on z = (x - centre) / sigma over the window


def _same_side(k: int, of: int, beyond: float) -> Callable[[np.ndarray], bool]:
    return lambda z: bool(np.sum(z > beyond) >= k or np.sum(z < -beyond) >= k)


def _one_side(z: np.ndarray) -> bool:
    return bool(np.all(z > 0) or np.all(z < 0))


def _trend(z: np.ndarray) -> bool:
    steps = np.diff(z)
    return bool(np.all(steps > 0) or np.all(steps < 0))


def _alternating(z: np.ndarray) -> bool:
    steps = np.sign(np.diff(z))
    return bool(np.all(steps != 0) and np.all(steps[1:] == -steps[:-1]))


def _beyond(limit: float) -> Callable[[np.ndarray], bool]:
    return lambda z: bool(np.abs(z[-1]) > limit)


WESTERN_ELECTRIC = (
    Rule(name="WE1", text="one point beyond 3 sigma", window=1, broken=_beyond(3.0)),
    Rule(
        name="WE2",
        text="2 of 3 points beyond 2 sigma on one side",
        window=3,
        broken=_same_side(2, 3, 2.0),
    ),
    Rule(
        name="WE3",
        text="4 of 5 points beyond 1 sigma on one side",
        window=5,
        broken=_same_side(4, 5, 1.0),
    ),
    Rule(
        name="WE4", text="8 points in a row on one side of the centre", window=8, broken=_one_side
    ),
)
NELSON = (
    Rule(name="N1", text="one point beyond 3 sigma", window=1, broken=_beyond(3.0)),
    Rule(name="N2", text="9 points in a row on one side of the centre", window=9, broken=_one_side),
    Rule(name="N3", text="6 points in a row steadily rising or falling", window=6, broken=_trend),
    Rule(
        name="N4", text="14 points in a row alternating up and down", window=14, broken=_alternating
    ),
    Rule(
        name="N5",
        text="2 of 3 points beyond 2 sigma on one side",
        window=3,
        broken=_same_side(2, 3, 2.0),
    ),
    Rule(
        name="N6",
        text="4 of 5 points beyond 1 sigma on one side",
        window=5,
        broken=_same_side(4, 5, 1.0),
    ),
    Rule(
        name="N7",
        text="15 points in a row within 1 sigma",
        window=15,
        broken=lambda z: bool(np.all(np.abs(z) < 1)),
    ),
    Rule(
        name="N8",
        text="8 points in a row beyond 1 sigma, none within",
        window=8,
        broken=lambda z: bool(np.all(np.abs(z) > 1)),
    ),
)
RULE_SETS = {"western-electric": WESTERN_ELECTRIC, "nelson": NELSON, "beyond-limits": ()}


def check_rules(
    values: ArrayLike, centre: float, sigma: float, rule_set: str, *, lower: float, upper: float
) -> tuple[Alarm, ...]:
    """Every point outside [lower, upper], then every break of the chosen rule set's pattern
    rules (its one-point rule is the limits check itself, so it is not repeated)."""
    x = np.asarray(values, dtype=float)
    rules = RULE_SETS[rule_set]
    first = next((r.name for r in rules if r.window == 1), "limits")
    alarms = [
        Alarm(rule=first, index=int(i), text="beyond the control limits")
        for i in np.flatnonzero((x < lower) | (x > upper))
    ]
    if sigma > 0:
        z = (x - centre) / sigma
        for rule in rules:
            if rule.window == 1:
                continue
            alarms += [
                Alarm(rule=rule.name, index=i, text=rule.text)
                for i in range(rule.window - 1, len(z))
                if rule.broken(z[i - rule.window + 1 : i + 1])
            ]
    return tuple(sorted(alarms, key=lambda a: (a.index, a.rule)))
