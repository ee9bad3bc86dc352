"""The limiting-voltage search of a production plan: which level to read next. Pure numpy.

The judge finds VL where the rising forward current first reaches the knee reference, between
the two sweep readings that bracket it (sequencer.judge.knee). A full sweep brackets it on a fixed
grid; a production plan brackets it on a few levels chosen from the readings so far: the runner
asks `next_level` after each reading and stops when it answers None.

The bracket is [a, b]: b the lowest forward reading at or above the reference, a the reading
just below it in level order. The next level is placed from an estimate of the crossing: the
recipe's typical limiting voltage for the first two readings while nothing has been read below
b, then the parabola through a, b and the nearest other reading (0 V / 0 A standing in for a,
since a passive part draws nothing at 0 V). The level lands half the resolution to one side of
the estimate (or one resolution from a bracket end the estimate lies close to), so that a good
estimate closes the bracket with the reading after it and a poor one still shrinks it: a device
near the typical VL takes two readings. From the fourth reading on, a bracket still wider than
twice the resolution is halved instead, so the search is never slower than bisection. It ends
when both ends are readings at most `resolution_v` apart, when the bracket leaves the search's
range, or after `max_points` readings; the judge then interpolates as it does on a full sweep.

`knee_reference` repeats the judge's reference (sequencer.judge.figures: knee_fraction x IP, IP from
the spot readings at VT, else the window's least-squares line at VT; or a fixed current) on the
readings taken so far, so the search aims where the judge will look. A test keeps them equal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sequencer.judge.slopes import masked_mean, window_fit

# as sequencer.judge.figures: a reading belongs to a level programmed within this
SPOT_MATCH_V = 1e-3
WINDOW_EDGE_V = 1e-9
LEVEL_DIGITS = 6  # levels are rounded to the microvolt: plain numbers on the wire and in the log
BISECT_AFTER = 3  # from the fourth reading on, a wide bracket is halved: at worst bisection


@dataclass(frozen=True)
class KneeSearch:
    """Where and how finely to search, and what the judge's knee reference needs."""

    low_v: float  # no level below this is read
    high_v: float  # ... nor above this (preflight checks the segment up to here)
    start_v: float  # the first estimate of VL
    resolution_v: float
    max_points: int
    test_voltage_v: float
    slope_window_v: float
    knee_fraction: float
    fixed_reference_a: float | None = None  # knee_current, or knee_fraction x the IP min limit

    def __post_init__(self) -> None:
        if not (0 <= self.low_v < self.high_v and self.resolution_v > 0):
            raise ValueError("a knee search needs 0 <= low_v < high_v and a positive resolution")

    @property
    def expected_points(self) -> int:
        """Readings a search usually takes, for time estimates: two, one each side of the
        typical VL (a device far from it takes one or two more; benchmarks/production_plan.py
        counts 2.0 a device over the demo lot)."""
        return min(2, self.max_points)


def knee_reference(
    s: KneeSearch,
    level_v: np.ndarray,
    voltage_v: np.ndarray,
    current_a: np.ndarray,
    clamped: np.ndarray,
    spot: np.ndarray,
) -> float:
    """The judge's knee reference current from the readings so far (NaN: it has none)."""
    if s.fixed_reference_a is not None:
        return s.fixed_reference_a
    level, current = np.asarray(level_v, float), np.asarray(current_a, float)
    clamped, spot = np.asarray(clamped, bool), np.asarray(spot, bool)
    good = np.isfinite(voltage_v) & np.isfinite(current) & ~clamped
    at_vt = spot & (np.abs(level - s.test_voltage_v) <= SPOT_MATCH_V)
    if at_vt.any():
        count, mean, _ = masked_mean(current[None, at_vt], good[None, at_vt])
        ip = float(mean[0]) if count[0] else math.nan
    else:
        ip = _line_at_test_voltage(s, level, np.asarray(voltage_v, float), current, good, spot)
    return s.knee_fraction * ip


def _line_at_test_voltage(s: KneeSearch, level, voltage, current, good, spot) -> float:
    half = s.slope_window_v / 2 + WINDOW_EDGE_V
    window = ~spot & (level >= 0) & (np.abs(level - s.test_voltage_v) <= half)
    if not window.any() or (~good[window] & np.isfinite(current[window])).any():
        return math.nan  # nothing there, or a clamped reading: the judge has no IP either
    with np.errstate(divide="ignore", invalid="ignore"):
        fit = window_fit(voltage[None, window], current[None, window], good[None, window])
        value = float(fit.at(s.test_voltage_v)[0])
    return value if int(fit.points[0]) >= 3 and math.isfinite(float(fit.slope[0])) else math.nan


def next_level(
    s: KneeSearch,
    reference_a: float,
    level_v: np.ndarray,
    current_a: np.ndarray,
    good: np.ndarray,
    taken: int,
) -> float | None:
    """The next level to read, or None when the search is over.

    `level_v`, `current_a`, `good` are the forward sweep readings so far (the plan's fixed
    points and the search's own), in any order; `taken` is how many the search has read."""
    if taken >= s.max_points or not (math.isfinite(reference_a) and reference_a > 0):
        return None
    bracket = _bracket(reference_a, level_v, current_a, good)
    if bracket is None:
        return None
    (a_v, a_i), (b_v, b_i), third = bracket
    measured_a = not math.isnan(a_i)
    if measured_a and b_v - a_v <= s.resolution_v * (1 + 1e-9):
        return None
    lo = a_v if measured_a else s.low_v
    hi = min(b_v, s.high_v)
    if hi <= lo + 2 * _margin(s, lo, hi) or (not measured_a and b_v <= s.low_v):
        return None  # the bracket lies beyond the search's range: the judge says what it can
    if measured_a:
        estimate = _estimate(reference_a, (a_v, a_i), (b_v, b_i), third)
    elif taken < 2:  # nothing read below b yet: aim at the typical VL (or just below b)
        estimate = min(max(s.start_v, lo), hi)
    else:  # the typical VL was too high: a passive part draws nothing at 0 V
        estimate = max(_estimate(reference_a, (0.0, 0.0), (b_v, b_i), third), lo)
    if taken >= BISECT_AFTER and hi - lo > 2 * s.resolution_v:
        estimate = (lo + hi) / 2  # estimates that keep missing: halve the bracket instead
    return _place(s, estimate, lo, hi, measured_a, level_v)


def _bracket(ref: float, level_v, current_a, good):
    """((a_v, a_i), (b_v, b_i), third reading or None); a_i is NaN when nothing lies below b.
    None when no good reading reaches the reference, or the one just below b is not good
    (the judge then reports the limiting voltage missing; more readings would not change it)."""
    level = np.asarray(level_v, float)
    current = np.asarray(current_a, float)
    good = np.asarray(good, bool)
    forward = level >= 0
    order = np.argsort(level[forward], kind="stable")
    lv, iv, gv = level[forward][order], current[forward][order], good[forward][order]
    hit = gv & (iv >= ref)
    if not hit.any():
        return None
    k = int(hit.argmax())
    if k > 0 and not gv[k - 1]:
        return None
    a = (float(lv[k - 1]), float(iv[k - 1])) if k > 0 else (math.nan, math.nan)
    ends = [float(lv[k])] + ([a[0]] if k > 0 else [])
    others = [(float(lv[j]), float(iv[j])) for j in range(len(lv)) if gv[j] and j not in (k - 1, k)]
    third = min(others, key=lambda p: min(abs(p[0] - e) for e in ends), default=None)
    return a, (float(lv[k]), float(iv[k])), third


def _estimate(ref: float, a, b, third) -> float:
    """Where the current reaches `ref` between a and b: on the parabola through a, b and the
    third reading when it crosses there, else on the chord."""
    (a_v, a_i), (b_v, b_i) = a, b
    chord = a_v + (ref - a_i) * (b_v - a_v) / (b_i - a_i) if b_i != a_i else (a_v + b_v) / 2
    if third is None or third[0] in (a_v, b_v):
        return chord
    x = np.array([a_v, b_v, third[0]])
    y = np.array([a_i, b_i, third[1]])
    with np.errstate(all="ignore"):
        coeffs = np.polyfit(x - a_v, y - ref, 2)
        roots = np.roots(coeffs)
    inside = [float(r.real) + a_v for r in roots if abs(r.imag) < 1e-12 and 0 < r.real < b_v - a_v]
    return inside[0] if len(inside) == 1 else chord


def _margin(s: KneeSearch, lo: float, hi: float) -> float:
    """How close to a bracket end a level may be: a reading on top of another tells nothing."""
    return min(s.resolution_v / 8, (hi - lo) / 4)


def _place(s: KneeSearch, x: float, lo: float, hi: float, measured_a: bool, levels) -> float | None:
    r = s.resolution_v
    if measured_a and x - lo <= r / 2 and lo + r < hi:
        level = lo + r  # the crossing sits just above a: one reading at a + r may close it
    elif hi - x <= r / 2 and hi - r > lo:
        level = hi - r  # ... just below b: one reading at b - r may close it
    elif x - lo >= hi - x:
        level = x - r / 2
    else:
        level = x + r / 2
    margin = _margin(s, lo, hi)
    floor = lo + margin if measured_a else lo
    level = round(min(max(level, floor), hi - margin), LEVEL_DIGITS)
    if np.any(np.abs(np.asarray(levels, float) - level) < 10**-LEVEL_DIGITS):
        level = round((max(lo, floor) + hi - margin) / 2, LEVEL_DIGITS)  # bisect instead
        if np.any(np.abs(np.asarray(levels, float) - level) < 10**-LEVEL_DIGITS):
            return None
    return level
