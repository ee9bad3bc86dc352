"""What kind of curve a row is: ok, open, short, compliance-limited, oscillating, non-monotonic.

Tested in that order; the first that holds is the classification, and its number (a voltage, a
scatter, a drop) goes into the reason. Only forward points (programmed level >= 0) count: a
reverse sweep of a bare regulator conducts like a diode and clamps, which is no defect.

The reading scatter is estimated on the plateau (forward sweep from the knee voltage up) from
each point's distance to the chord of its two neighbours: for independent noise of standard
deviation sigma that distance has variance sigma^2 (1 + t^2 + (1 - t)^2), t the point's place
between its neighbours, and a smooth curve adds almost nothing. The same sigma serves as the
Type A uncertainty of a single reading elsewhere in the judge. Pure numpy.
"""

from __future__ import annotations

import numpy as np

from .judgesettings import SHAPES, JudgeSettings

OK, OPEN, SHORT, CLAMPED, OSCILLATING, NON_MONOTONIC = range(len(SHAPES))


def classify(r, s: JudgeSettings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(shape code, number quoted in its reason, plateau noise sigma) per row."""
    n = r.voltage.shape[0]
    shape = np.zeros(n, np.int8)
    quoted = np.full(n, np.nan)
    v, i, good, clamped = r.take(r.layout.forward)
    sigma, level = plateau_noise(r, s.knee_voltage_v)
    spot_scatter = _spot_scatter(r, s.test_voltage_v)
    # Later assignments must not overwrite earlier ones: go from the last test to the first.
    drop, peak = _drawdown(r)
    _mark(shape, quoted, drop > s.shape.drop_limit * peak, NON_MONOTONIC, drop)
    scatter = np.fmax(sigma / level, spot_scatter)
    _mark(shape, quoted, scatter > s.shape.scatter_limit, OSCILLATING, scatter)
    levels = np.broadcast_to(r.layout.level_v[r.layout.forward], v.shape)
    first_clamp = np.where(clamped, levels, np.inf).min(axis=1, initial=np.inf)
    _mark(shape, quoted, clamped.any(axis=1), CLAMPED, first_clamp)
    top = np.where(good, np.abs(i), 0.0).max(axis=1, initial=0.0)
    _mark(shape, quoted, (top < s.shape.open_below_a) & ~clamped.any(axis=1), OPEN, top)
    low_clamp = clamped & (np.abs(v) < s.shape.short_below_v)
    at = np.where(low_clamp, np.abs(v), np.inf).min(axis=1, initial=np.inf)
    _mark(shape, quoted, low_clamp.any(axis=1), SHORT, at)
    return shape, quoted, sigma


def _mark(shape, quoted, where: np.ndarray, code: int, number: np.ndarray) -> None:
    shape[where] = code
    quoted[where] = number[where]


def plateau_noise(r, from_v: float) -> tuple[np.ndarray, np.ndarray]:
    """(sigma of one reading, mean |current|) on the forward sweep from `from_v` up."""
    cols = r.layout.sweep[r.layout.sweep_levels() >= from_v - 1e-9]
    n = r.voltage.shape[0]
    if cols.size < 3:
        return np.full(n, np.nan), np.full(n, np.nan)
    v, i, good, _ = r.take(cols)
    span = v[:, 2:] - v[:, :-2]
    t = (v[:, 1:-1] - v[:, :-2]) / span
    chord = i[:, :-2] + (i[:, 2:] - i[:, :-2]) * t
    ok = good[:, :-2] & good[:, 1:-1] & good[:, 2:] & (span != 0)
    weight = 1.0 + t * t + (1.0 - t) ** 2
    dist = i[:, 1:-1] - chord
    var = np.where(ok, dist * dist / weight, 0.0).sum(axis=1) / ok.sum(axis=1)
    level = np.where(good, np.abs(i), 0.0).sum(axis=1) / good.sum(axis=1)
    return np.sqrt(var), level


def _spot_scatter(r, volts: float) -> np.ndarray:
    """Relative standard deviation of repeated spot readings at the test voltage."""
    cols = r.layout.at(volts, "spot")
    n = r.voltage.shape[0]
    if cols.size < 2:
        return np.full(n, np.nan)
    _, i, good, _ = r.take(cols)
    count = good.sum(axis=1)
    mean = np.where(good, i, 0.0).sum(axis=1) / count
    dev = np.where(good, i - mean[:, None], 0.0)
    sd = np.sqrt((dev * dev).sum(axis=1) / (count - 1))
    return np.where(count >= 2, sd / np.abs(mean), np.nan)


def _drawdown(r) -> tuple[np.ndarray, np.ndarray]:
    """(largest fall below the running maximum, peak current) along the forward sweep."""
    n = r.voltage.shape[0]
    if r.layout.sweep.size == 0:
        return np.zeros(n), np.zeros(n)
    _, i, good, _ = r.take(r.layout.sweep)
    rising = np.maximum.accumulate(np.where(good, i, -np.inf), axis=1)
    drop = np.where(good, rising - i, 0.0).max(axis=1, initial=0.0)
    peak = rising[:, -1]
    return drop, np.where(np.isfinite(peak), peak, 0.0)
