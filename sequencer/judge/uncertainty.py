"""Combining standard uncertainties, and ILAC-G8 guard bands. Pure numpy, no I/O.

The instrument's accuracy per range, and the standard uncertainty of one reading or of the
difference of two, are `sequencer.model.accuracy` (the station's settings carry them).
"""

from __future__ import annotations

import numpy as np


def combine(*parts: np.ndarray | float) -> np.ndarray:
    """Root sum of squares of independent standard uncertainties."""
    # Summed from the first square on, not from 0: the same sums, one operation fewer.
    squares = [np.square(np.asarray(p, dtype=float)) for p in parts] or [np.float64(0.0)]
    total = squares[0]
    for square in squares[1:]:
        total = total + square
    return np.sqrt(total)


def acceptance_zone(
    low: float | None, high: float | None, expanded: float
) -> tuple[float | None, float | None]:
    """Guarded acceptance per ILAC-G8:09/2019: the tolerance narrowed by w = U on each side."""
    return (
        None if low is None else low + expanded,
        None if high is None else high - expanded,
    )
