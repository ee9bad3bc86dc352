"""Bins: ordered rules, first match wins; a hard bin (number, pass/fail class) and a soft bin.

The soft bin is the rule's name when it has one (a grade, e.g. a current class for matched LED
strings), otherwise the kind of the device's first reason ("regulated current below min"), so a
fail bin still says why. Pure numpy over many devices at once.
"""

from __future__ import annotations

from functools import cache

import numpy as np

from sequencer.model.judgesettings import CLASSIFICATIONS, VERDICTS, BinRule, FigureRange


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
