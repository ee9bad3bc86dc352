"""Bins: ordered rules, first match wins; a hard bin (number, pass/fail class) and a soft bin.

The soft bin is the rule's name when it has one (a grade, e.g. a current class for matched LED
strings), otherwise the kind of the device's first reason ("regulated current below min"), so a
fail bin still says why. Pure numpy over many devices at once.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from functools import cache

import numpy as np

from sequencer.model.judgesettings import (
    CLASSIFICATIONS,
    VERDICTS,
    BinRule,
    FigureLimit,
    FigureRange,
)


def _in_range(value: np.ndarray, at_least: np.ndarray, rng: FigureRange) -> np.ndarray:
    # Any comparison with NaN is false: a missing value is outside every range with a side.
    parts = []
    if rng.min is not None:
        parts.append(value >= rng.min)  # a lower bound above min is above min
    if rng.max is not None:
        parts.append(~at_least & (value < rng.max))  # a lower bound says nothing about a maximum
    if not parts:
        return ~np.isnan(value)
    return parts[0] & parts[1] if len(parts) == 2 else parts[0]


@cache
def _members(names: tuple[str, ...], of: tuple[str, ...]) -> np.ndarray:
    """Code -> is it one of `names`: indexing this table gives np.isin's answer for codes of
    `of`, without its fixed cost, which dominates for the one row of a device judged alone."""
    table = np.isin(np.arange(len(of)), [of.index(x) for x in names])
    table.flags.writeable = False  # shared by every call
    return table


def assign(
    rules: tuple[BinRule, ...],
    verdict: np.ndarray,
    classification: np.ndarray,
    values: dict[str, np.ndarray],
    at_least: dict[str, np.ndarray],
) -> np.ndarray:
    """Index of the first matching rule per device (the last rule is a catch-all)."""
    chosen = np.zeros(verdict.shape, np.int16) - 1  # (np.full costs more, for one device)
    for index, rule in enumerate(rules):
        match = chosen < 0
        if not match.any():
            break  # every device has its bin (a passing device alone, mostly at the first)
        if rule.verdicts:
            match &= _members(rule.verdicts, VERDICTS)[verdict]
        if rule.classifications:
            match &= _members(rule.classifications, CLASSIFICATIONS)[classification]
        for rng in rule.ranges:
            match &= _in_range(values[rng.figure], at_least[rng.figure], rng)
        chosen[match] = index
    return chosen


def soft_bin(rule: BinRule, first_reason: str, verdict: str) -> str:
    return rule.name or first_reason or verdict


@dataclass(frozen=True)
class BinGap:
    """Where a device that passes every limit falls into a fail bin no condition sends it to."""

    figures: tuple[str, ...]  # the figures the bins look at
    low: tuple[float, ...]  # the gap's first point, per figure
    below: float | None  # one figure: the gap ends just below this; None: at `low` itself
    bin_index: int  # the rule it falls into


def pass_gaps(rules: tuple[BinRule, ...], limits: tuple[FigureLimit, ...]) -> list[BinGap]:
    """Values inside the pass limits that no pass bin takes: a passing part there would be
    binned as a failure without a word (bins take min <= value < max; limits take the max).

    Tried on a grid of every bin edge and limit of the figures the bins look at, with the
    midpoints between them; a figure without limits is tried only between its bins' edges (a
    bin range may stand in for a limit there). Grids of several figures are their product."""
    figures = tuple(sorted({r.figure for rule in rules for r in rule.ranges}))
    if not figures or not rules:
        return []
    bounds = {x.figure: x for x in limits}
    axes = [_trial_values(rules, f, bounds.get(f)) for f in figures]
    if any(len(a) == 0 for a in axes) or math.prod(len(a) for a in axes) > 200_000:
        return []
    grid = np.meshgrid(*axes, indexing="ij")
    values = {f: g.ravel() for f, g in zip(figures, grid, strict=True)}
    n = values[figures[0]].size
    verdict = np.full(n, VERDICTS.index("pass"), np.int8)
    classification = np.full(n, CLASSIFICATIONS.index("ok"), np.int8)
    at_least = {f: np.zeros(n, bool) for f in figures}
    chosen = assign(rules, verdict, classification, values, at_least)
    unintended = np.array([r.klass == "fail" and not r.ranges for r in rules])[chosen]
    return _runs(figures, values, chosen, unintended, axes)


def _trial_values(rules: tuple[BinRule, ...], figure: str, limit: FigureLimit | None) -> np.ndarray:
    edges = {x for rule in rules for r in rule.ranges if r.figure == figure for x in (r.min, r.max)}
    edges.discard(None)
    lo = limit.min if limit and limit.min is not None else None
    hi = limit.max if limit and limit.max is not None else None
    if limit is None or (lo is None and hi is None):
        lo, hi = min(edges, default=None), max(edges, default=None)  # type: ignore[type-var]
        if hi is not None:
            hi = np.nextafter(hi, -np.inf)  # the top edge itself belongs to no bin
    inside = sorted({x for x in (*edges, lo, hi) if x is not None and _between(x, lo, hi)})
    mids = [(a + b) / 2 for a, b in itertools.pairwise(inside)]
    return np.array(sorted({*inside, *mids}))


def _between(x: float, lo: float | None, hi: float | None) -> bool:
    return (lo is None or x >= lo) and (hi is None or x <= hi)


def _runs(figures, values, chosen, unintended, axes) -> list[BinGap]:
    """Gap points grouped: along one figure into from-to runs; over several, each point."""
    where = np.flatnonzero(unintended)
    if len(figures) > 1:
        return [
            BinGap(figures, p, None, int(chosen[i]))
            for i in where[:5]
            for p in [tuple(float(values[f][i]) for f in figures)]
        ]
    gaps: list[BinGap] = []
    axis = values[figures[0]]
    for run in np.split(where, np.flatnonzero(np.diff(where) != 1) + 1):
        if run.size:
            after = run[-1] + 1
            below = float(axis[after]) if after < axis.size else None
            gaps.append(BinGap(figures, (float(axis[run[0]]),), below, int(chosen[run[0]])))
    return gaps
