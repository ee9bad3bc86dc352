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

from sequencer.judge.slopes import masked_mean
from sequencer.model.judgesettings import SHAPES, JudgeSettings

OK, OPEN, SHORT, CLAMPED, OSCILLATING, NON_MONOTONIC = range(len(SHAPES))
COLLAPSE_FRACTION = 0.5


def classify(r, s: JudgeSettings) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(shape code, number quoted in its reason, plateau noise sigma) per row."""
    n = r.voltage.shape[0]
    shape = np.zeros(n, np.int8)
    quoted = np.full(n, np.nan)
    sigma, level = plateau_noise(r, s.knee_voltage_v)
    # Later assignments overwrite earlier ones: go from the last test to the first.
    drop, peak = _drawdown(r)
    _mark(shape, quoted, drop > s.shape.drop_limit * peak, NON_MONOTONIC, drop)
    # Scatter relative to a current that has fallen to the open threshold says nothing about
    # oscillation (a part gone open mid-sweep reads pA of noise around pA), so the floor.
    floor = s.shape.open_below_a
    scatter = sigma / np.fmax(level, floor)
    spots = _spot_scatter(r, s.test_voltage_v)
    if spots is not None:  # (without, fmax with their NaN would change nothing)
        spot_sd, spot_mean = spots
        scatter = np.fmax(scatter, spot_sd / np.fmax(spot_mean, floor))
    _mark(shape, quoted, scatter > s.shape.scatter_limit, OSCILLATING, scatter)
    # A fall by most of the peak is one event (a part going open mid-sweep), not scatter; it
    # would also inflate the scatter estimate, so it keeps its own name.
    collapse = drop > COLLAPSE_FRACTION * peak
    _mark(shape, quoted, collapse, NON_MONOTONIC, drop)
    v, i, good, clamped = r.take(r.layout.forward)
    top = np.maximum.reduce(np.where(good, np.abs(i), 0.0), axis=1, initial=0.0)
    any_clamped = np.logical_or.reduce(clamped, axis=1)
    readable = np.logical_or.reduce(good, axis=1)  # no usable reading: no evidence of an open
    _mark(shape, quoted, readable & (top < s.shape.open_below_a) & ~any_clamped, OPEN, top)
    rows = any_clamped.nonzero()[0]  # few rows clamp: look closer only at those
    if rows.size:
        c, volts = clamped[rows], np.abs(v[rows])
        levels = r.layout.level_v[r.layout.forward]
        first = np.where(c, levels, np.inf).min(axis=1)
        _mark(shape, quoted, rows, CLAMPED, _spread(n, rows, first))
        low = c & (volts < s.shape.short_below_v)
        at = np.where(low, volts, np.inf).min(axis=1)
        short_rows = rows[low.any(axis=1)]
        _mark(shape, quoted, short_rows, SHORT, _spread(n, rows, at))
    return shape, quoted, sigma


def _spread(n: int, rows: np.ndarray, values: np.ndarray) -> np.ndarray:
    out = np.full(n, np.nan)
    out[rows] = values
    return out


def _mark(shape, quoted, where: np.ndarray, code: int, number: np.ndarray) -> None:
    if where.dtype == bool:  # copyto: the same marks with fewer calls than indexing
        np.copyto(shape, code, where=where)
        np.copyto(quoted, number, where=where)
    else:
        shape[where] = code
        quoted[where] = number[where]


def plateau_noise(r, from_v: float) -> tuple[np.ndarray, np.ndarray]:
    """(sigma of one reading, mean |current|) on the forward sweep from `from_v` up.

    Each point's place between its neighbours comes from the programmed levels: the measured
    voltages differ from them by far less than would matter here, and one vector for the lot
    saves most of the work."""
    layout = r.layout
    cols, t, usable, weight = layout.remember(("plateau", from_v), lambda: _plateau(layout, from_v))
    n = r.voltage.shape[0]
    if cols.size < 3:
        return np.full(n, np.nan), np.full(n, np.nan)
    i, good = r.take(cols, "current", "good")
    dist = i[:, 1:-1] - (1.0 - t) * i[:, :-2] - t * i[:, 2:]
    ok = good[:, :-2] & good[:, 1:-1] & good[:, 2:] & usable
    dist *= dist
    dist[~ok] = 0.0
    var = (dist @ weight) / np.add.reduce(ok, axis=1)
    level = np.add.reduce(np.where(good, i, 0.0), axis=1) / np.add.reduce(good, axis=1)
    return np.sqrt(var), np.abs(level)


def _plateau(layout, from_v: float) -> tuple:
    """What plateau_noise needs of the plan alone: the columns, each inner point's place t,
    whether its neighbours are apart, and the weight of its squared distance."""
    cols = layout.sweep[layout.sweep_levels() >= from_v - 1e-9]
    if cols.size < 3:
        return cols, None, None, None
    x = layout.level_v[cols]
    span = x[2:] - x[:-2]
    usable = span != 0
    t = np.where(usable, (x[1:-1] - x[:-2]) / np.where(usable, span, 1.0), 0.0)
    weight = np.where(usable, 1.0 / (1.0 + t * t + (1.0 - t) ** 2), 0.0)
    return cols, t, usable, weight


def _spot_scatter(r, volts: float) -> tuple[np.ndarray, np.ndarray] | None:
    """(standard deviation, |mean|) of repeated spot readings at the test voltage; None
    without repeats."""
    cols = r.layout.at(volts, "spot")
    if cols.size < 2:
        return None
    i, good = r.take(cols, "current", "good")
    count, mean, sd = masked_mean(i, good)
    return np.where(count >= 2, sd, np.nan), np.abs(mean)


def _drawdown(r) -> tuple[np.ndarray, np.ndarray]:
    """(largest fall below the running maximum, peak current) along the forward sweep."""
    n = r.voltage.shape[0]
    if r.layout.sweep.size == 0:
        return np.zeros(n), np.zeros(n)
    i, good = r.take(r.layout.sweep, "current", "good")
    masked = np.where(good, i, -np.inf)
    rising = np.maximum.accumulate(masked, axis=1)
    rising -= masked  # bad points: +inf, hidden below
    rising[~good] = 0.0
    drop = np.maximum.reduce(rising, axis=1, initial=0.0)
    peak = np.maximum.reduce(masked, axis=1, initial=-np.inf)
    return drop, np.where(np.isfinite(peak), peak, 0.0)
