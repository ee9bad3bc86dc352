"""The instrument's accuracy per range, and the standard uncertainty of readings it gives.

A data sheet states accuracy as a limit, ±(gain x |reading| + offset), per measurement range.
Read as a rectangular distribution, that limit a gives the standard uncertainty a/sqrt(3)
[JCGM 100:2008 (GUM) 4.3.7, from memory]. A reading is taken as measured on the smallest range
that holds it (what an autoranging SMU does); above the top range, the top range applies.

A difference of two readings on one range (the DC slope of an impedance) loses the offset, which
is common to both, and keeps the gain: u(dI) = gain x |dI| / sqrt(3). Readings on two ranges are
taken as independent. Pure numpy, no I/O.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

RECTANGULAR = math.sqrt(3.0)


@dataclass(frozen=True)
class RangeAccuracy:
    """One measurement range: full scale, gain (fraction of reading) and offset (SI units)."""

    range: float
    gain: float
    offset: float

    def __post_init__(self) -> None:
        if not self.range > 0:
            raise ValueError("a range must be positive")
        if not (0 <= self.gain < 1 and self.offset >= 0):
            raise ValueError("gain must be 0 to 1 and offset not negative")


@dataclass(frozen=True)
class AccuracyTable:
    """The ranges of one quantity, ascending."""

    ranges: tuple[RangeAccuracy, ...]

    def __post_init__(self) -> None:
        full = [r.range for r in self.ranges]
        if not full or any(b <= a for a, b in itertools.pairwise(full)):
            raise ValueError("ranges must be given in ascending order, at least one")

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self._arrays

    @cached_property
    def _arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        # Built once per table: the judge asks for them a dozen times a device.
        return (
            np.array([r.range for r in self.ranges]),
            np.array([r.gain for r in self.ranges]),
            np.array([r.offset for r in self.ranges]),
        )

    @cached_property
    def _edges(self) -> np.ndarray:
        """Every full scale but the top one: a reading's range index is the number of these
        below it, which is searchsorted on all of them capped at the top range, in one call."""
        return self._arrays[0][:-1].copy()

    def range_index(self, reading: np.ndarray) -> np.ndarray:
        return self._index(np.abs(reading))

    def _index(self, magnitude: np.ndarray) -> np.ndarray:
        return self._edges.searchsorted(magnitude, side="left")

    def _parts(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(|x|, its range index), NaN taken as 0 for the range: fmax drops a NaN, which gives
        nan_to_num's answer at a tenth of its cost on the few values of one device."""
        magnitude = np.abs(x)
        return magnitude, self._index(np.fmax(magnitude, 0.0))

    def u(self, reading: np.ndarray | float) -> np.ndarray:
        """Standard uncertainty of readings (NaN stays NaN)."""
        # A NaN's range does not matter here (gain x NaN + offset is NaN on any range), so the
        # NaN-to-0 step of _parts is left out.
        magnitude = np.abs(np.asarray(reading, dtype=float))
        return self._u(magnitude, self._index(magnitude))

    def _u(self, magnitude: np.ndarray, k: np.ndarray) -> np.ndarray:
        _, gain, offset = self._arrays
        return (gain[k] * magnitude + offset[k]) / RECTANGULAR

    def u_difference(self, low: np.ndarray, high: np.ndarray) -> np.ndarray:
        """Standard uncertainty of high - low for two readings of this quantity."""
        lo, hi = np.asarray(low, dtype=float), np.asarray(high, dtype=float)
        if lo.shape != hi.shape:
            lo, hi = np.broadcast_arrays(lo, hi)
        _, gain, _ = self._arrays
        both = np.array([lo, hi])  # one pass over the two readings' ranges, not two
        magnitude, k = self._parts(both)
        u_lo, u_hi = self._u(magnitude, k)
        same = gain[k[1]] * np.abs(hi - lo) / RECTANGULAR
        return np.where(k[0] == k[1], same, np.hypot(u_lo, u_hi))


def _table(rows: list[tuple[float, float, float]]) -> AccuracyTable:
    return AccuracyTable(tuple(RangeAccuracy(*row) for row in rows))


# Defaults when a station file has no `accuracy:` section: invented round figures of the order
# a bench SMU states for one year at 23 C ± 5 C [common practice, no source]: current 0.05 % of
# reading + 0.025 % of range; voltage 0.02 % of reading + 0.01 % of range.
DEFAULT_CURRENT = _table([(r, 5e-4, 2.5e-4 * r) for r in (1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 0.1, 1.0)])
DEFAULT_VOLTAGE = _table([(r, 2e-4, 1e-4 * r) for r in (0.2, 2.0, 20.0, 200.0)])


@dataclass(frozen=True)
class Accuracy:
    """What the station's SMU measures to: one table for current, one for voltage."""

    current: AccuracyTable = DEFAULT_CURRENT
    voltage: AccuracyTable = DEFAULT_VOLTAGE


DEFAULT_ACCURACY = Accuracy()
