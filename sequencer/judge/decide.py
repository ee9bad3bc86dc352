"""Figures against limits under the recipe's decision rule, for many devices at once.

Simple acceptance: inside the limits passes. Guarded acceptance [src: ILAC-G8:09/2019; JCGM
106:2012]: the acceptance zone is the tolerance narrowed by the expanded uncertainty
U = k u on each side; a result between a limit and its acceptance bound is "in the guard band",
a verdict of its own, neither passed nor failed. A figure without a known uncertainty cannot be
shown to lie inside the acceptance zone, so under the guarded rule it sits in the guard band.

A lower bound ("at least", an impedance within noise or a reading clamped at compliance) passes
a minimum it already exceeds; against a maximum it proves nothing unless it already exceeds it.
Pure numpy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sequencer.judge.figures import FigureArrays
from sequencer.model.judgesettings import (
    CLASSIFICATIONS,
    SHAPES,
    VERDICTS,
    FigureLimit,
    JudgeSettings,
)

WITHIN, BELOW, ABOVE, GUARD_LOW, GUARD_HIGH, UNPROVEN = range(6)
FAILING = (BELOW, ABOVE, UNPROVEN)
GUARDED = (GUARD_LOW, GUARD_HIGH)


def _table(codes: tuple[int, ...]) -> np.ndarray:
    """Status code -> is it one of these: indexing the table is np.isin's answer without its
    fixed cost, which dominates for the one row of a device judged alone."""
    table = np.isin(np.arange(UNPROVEN + 1), codes)
    table.flags.writeable = False
    return table


IS_FAILING, IS_GUARDED = _table(FAILING), _table(GUARDED)
PASS, FAIL, GUARD_BAND = (VERDICTS.index(v) for v in ("pass", "fail", "guard-band"))
INCOMPLETE = CLASSIFICATIONS.index("incomplete")
SHAPE_CLASS = np.array([CLASSIFICATIONS.index(x) for x in SHAPES], np.int8)


@dataclass(frozen=True, eq=False)
class Decisions:
    status: dict[str, np.ndarray]  # per limited figure: WITHIN ... UNPROVEN
    expanded: dict[str, np.ndarray]  # per limited figure: U used for its guard band
    classification: np.ndarray  # index into CLASSIFICATIONS
    verdict: np.ndarray  # index into VERDICTS


def limit_status(
    value: np.ndarray,
    at_least: np.ndarray,
    expanded: np.ndarray,
    limit: FigureLimit,
) -> np.ndarray:
    """Where each value stands against one limit; `expanded` is 0 under simple acceptance."""
    return _status(value, at_least, expanded, _side(limit.min), _side(limit.max))


def _side(bound: float | None) -> float:
    return math.nan if bound is None else bound


def _status(value, at_least, expanded, low, high) -> np.ndarray:
    """`limit_status` for bounds that broadcast against the values (a column of them judges
    every limit of a device at once). NaN is a side without a limit: every comparison with it
    is false, so it marks nothing. Later marks overwrite earlier ones."""
    status = np.zeros(np.shape(value), np.int8)  # WITHIN
    plain = ~at_least & ~np.isnan(value)
    below, above = value < low, value > high
    status[plain & (value > high - expanded)] = GUARD_HIGH
    status[plain & (value < low + expanded)] = GUARD_LOW
    status[plain & below] = BELOW
    status[at_least & below] = UNPROVEN
    status[plain & above] = ABOVE
    status[at_least & (value <= high)] = UNPROVEN
    status[at_least & above] = ABOVE
    return status


def _bounds(s: JudgeSettings) -> tuple[list[str], np.ndarray, np.ndarray]:
    """The limited figures, and their min and max as columns (NaN where a side is open)."""
    low = np.array([[_side(limit.min)] for limit in s.limits])
    high = np.array([[_side(limit.max)] for limit in s.limits])
    low.flags.writeable = high.flags.writeable = False
    return [limit.figure for limit in s.limits], low, high


def decide(f: FigureArrays, s: JudgeSettings) -> Decisions:
    n = f.shape.shape[0]
    failing = np.zeros(n, bool)
    guarded = np.zeros(n, bool)
    status: dict[str, np.ndarray] = {}
    expanded: dict[str, np.ndarray] = {}
    if s.limits:
        # Every limit at once, a row each: the same comparisons, a fifth of the calls.
        names, low, high = s.remember("limit bounds", lambda: _bounds(s))
        value = np.array([f.value[name] for name in names])
        at_least = np.array([f.at_least[name] for name in names])
        if s.decision == "guarded":
            u = np.array([f.u[name] for name in names])
            k = s.coverage_factor or np.array([f.k[name] for name in names])
            big_u = np.where(np.isnan(u * k), np.inf, k * u)
        else:
            big_u = np.zeros(value.shape)
        codes = _status(value, at_least, big_u, low, high)
        failing |= np.logical_or.reduce(IS_FAILING[codes], axis=0)
        guarded |= np.logical_or.reduce(IS_GUARDED[codes], axis=0)
        status = dict(zip(names, codes, strict=True))
        expanded = dict(zip(names, big_u, strict=True))
    # Missing codes are never negative: any code at all is a missing figure.
    missing = np.logical_or.reduce(np.array([f.missing[name] for name in s.required()]), axis=0)
    shape_class = SHAPE_CLASS[f.shape]
    classification = np.where((f.shape == 0) & missing, INCOMPLETE, shape_class)
    failing |= classification != 0
    verdict = np.where(failing, FAIL, np.where(guarded, GUARD_BAND, PASS)).astype(np.int8)
    return Decisions(status, expanded, classification.astype(np.int8), verdict)
