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
    right = _parabola(v0, chord, h1, c, col(1), v1, i1, after=True)
    left = _parabola(v0, chord, h1, c, col(-2), v0, i0, after=False)
    right_ok, left_ok = ~np.isnan(right), ~np.isnan(left)
    volts = np.where(right_ok, right, np.where(left_ok, left, lin))
    spread = np.where(right_ok & left_ok, np.abs(right - left), np.abs(volts - lin) * 2)
    u_interp = np.where(right_ok | left_ok, spread / 2, np.nan)
    ok = found & (k > 0) & g0
    return Knee(np.where(ok, volts, np.nan), chord, u_interp, found, found & (k == 0), g0)


def _parabola(v0, chord, h1, c, third, vb, ib, *, after: bool) -> np.ndarray:
    """Crossing of the parabola through (k-1, k) and a third point, NaN where unusable.

    With x = V - V[k-1] the parabola is I = I[k-1] + chord x + a x (x - h1), a the second
    divided difference; solve a x^2 + (chord - a h1) x + (I[k-1] - ref) = 0 for the root
    near the chord's, in the stable form -2c / (b + sqrt(b^2 - 4 a c))."""
    v2, i2, g2 = third
    if after:
        a = ((i2 - ib) / (v2 - vb) - chord) / (v2 - v0)
    else:
        a = (chord - (ib - i2) / (vb - v2)) / (vb + h1 - v2)
    b = chord - a * h1
    disc = b * b - 4 * a * c
    x = -2 * c / (b + np.sqrt(disc))
    usable = g2 & (disc >= 0) & (b > 0) & (x >= -1e-12 * h1) & (x <= h1 * (1 + 1e-12))
    return np.where(usable, v0 + x, np.nan)
