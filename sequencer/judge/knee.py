"""The limiting voltage: where the rising forward current first reaches the knee reference.

Between the two sweep points that bracket the crossing (k-1 below, k at or above the reference)
the curve bends, so a straight chord puts the crossing late (by 1.5 % for a 0.25 mA part on a
0.25 V grid). A parabola through k-1, k and the next point k+1 does far better; the parabola
through k-2, k-1, k errs about as much the other way, so half the distance between the two
crossings is taken as the standard uncertainty of interpolating. Both parabolas share the chord
from k-1 to k and differ only in curvature, so one formula serves both. Checked against ngspice
fine-step output (tests/reference). Pure numpy; rows are devices, columns the forward sweep in
order of programmed level.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

OFFSETS = np.arange(-2, 2)  # the columns read around the first one at or above the reference


@dataclass(frozen=True, eq=False)
class Knee:
    volts: np.ndarray  # NaN where not found
    slope: np.ndarray  # dI/dV of the chord across the crossing
    u_interpolation: np.ndarray  # NaN when no second estimate exists
    found: np.ndarray  # the reference is reached at some good point
    first: np.ndarray  # ... already at the first point
    prev_good: np.ndarray  # the point below the crossing is a good reading


def crossing(v: np.ndarray, i: np.ndarray, good: np.ndarray, ref: np.ndarray) -> Knee:
    n, m = v.shape
    hit = good & (i >= ref[:, None])
    found = np.logical_or.reduce(hit, axis=1)
    k = hit.argmax(axis=1)
    # The four points around the crossing, k-2 ... k+1, gathered at once: one fancy index per
    # array is most of the cost when a device is judged alone.
    j = k[:, None] + OFFSETS
    inside = (j >= 0) & (j < m)
    j = np.minimum(np.maximum(j, 0), m - 1)
    rows = np.arange(n)[:, None]
    vs, i_s, gs = v[rows, j], i[rows, j], good[rows, j] & inside

    def col(offset: int):
        c = offset - OFFSETS[0]
        return vs[:, c], i_s[:, c], gs[:, c]

    (v0, i0, g0), (v1, i1, _) = col(-1), col(0)
    h1 = v1 - v0
    chord = (i1 - i0) / h1
    c = i0 - ref
    lin = v0 - c / chord
    right, left = _parabolas(vs, i_s, gs, v0, chord, h1, c)
    right_ok, left_ok = ~np.isnan(right), ~np.isnan(left)
    volts = np.where(right_ok, right, np.where(left_ok, left, lin))
    spread = np.where(right_ok & left_ok, np.abs(right - left), np.abs(volts - lin) * 2)
    u_interp = np.where(right_ok | left_ok, spread / 2, np.nan)
    ok = found & (k > 0) & g0
    return Knee(np.where(ok, volts, np.nan), chord, u_interp, found, found & (k == 0), g0)


# Columns of the four gathered points (k-2, k-1, k, k+1) that the two parabolas use, as rows:
# the first through k+1 (after the crossing), the second through k-2 (before it).
_FAR = np.array([3, 0])  # the third point
_SLOPE_FROM, _SLOPE_TO = np.array([2, 0]), np.array([3, 1])  # its chord: from -> to
_SIDE = np.array([[1.0], [-1.0]])  # after: chord(k, k+1) - chord; before: chord - chord(k-2, k-1)


def _parabolas(vs, i_s, gs, v0, chord, h1, c) -> tuple[np.ndarray, np.ndarray]:
    """Crossings of the parabolas through (k-1, k) and k+1, and through (k-1, k) and k-2; NaN
    where unusable. Both at once, a row each (for one device, half the calls).

    With x = V - V[k-1] a parabola is I = I[k-1] + chord x + a x (x - h1), a the second divided
    difference; solve a x^2 + (chord - a h1) x + (I[k-1] - ref) = 0 for the root near the
    chord's, in the stable form -2c / (b + sqrt(b^2 - 4 a c)). Negating a difference is exact,
    so `_SIDE` gives each row the same numbers as its own formula would."""
    v2, g2 = vs[:, _FAR].T, gs[:, _FAR].T
    to_v, from_v = vs[:, _SLOPE_TO].T, vs[:, _SLOPE_FROM].T
    third = (i_s[:, _SLOPE_TO].T - i_s[:, _SLOPE_FROM].T) / (to_v - from_v)
    # a: after, (slope(k, k+1) - chord) / (V[k+1] - V[k-1]); before, (chord - slope(k-2, k-1))
    # / (V[k-1] + h1 - V[k-2]).
    span = np.array([v2[0] - v0, v0 + h1 - v2[1]])
    a = (third - chord) * _SIDE / span
    b = chord - a * h1
    disc = b * b - 4 * a * c
    x = -2 * c / (b + np.sqrt(disc))
    usable = g2 & (disc >= 0) & (b > 0) & (x >= -1e-12 * h1) & (x <= h1 * (1 + 1e-12))
    right, left = np.where(usable, v0 + x, np.nan)
    return right, left
