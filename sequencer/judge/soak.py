"""Is the chamber stable yet? The soak rule on a stream of (time, reading) pairs, pure.

A set point is stable once every reading for the soak time has lain within the band of it; one
reading outside the band starts the wait again (the band-and-duration rule is common practice,
no source). The comparison is written so that NaN counts as outside.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class SoakTracker:
    """Feed it readings in time order; `stable` turns True once the rule holds."""

    set_point_c: float
    band_k: float
    soak_s: float
    in_band_since_s: float | None = None
    last_s: float | None = None

    def feed(self, time_s: float, reading_c: float) -> bool:
        """Take one reading; True when the soak rule holds after it."""
        if self.last_s is not None and not time_s >= self.last_s:
            raise ValueError(f"readings must come in time order ({time_s} after {self.last_s})")
        self.last_s = time_s
        if not abs(reading_c - self.set_point_c) <= self.band_k:  # NaN: outside
            self.in_band_since_s = None
            return False
        if self.in_band_since_s is None:
            self.in_band_since_s = time_s
        return self.stable

    @property
    def stable(self) -> bool:
        if self.in_band_since_s is None or self.last_s is None:
            return False
        return self.last_s - self.in_band_since_s >= self.soak_s

    def describe(self) -> str:
        if self.in_band_since_s is None or self.last_s is None:
            return f"approaching {self.set_point_c:g} degC"
        held = self.last_s - self.in_band_since_s
        return f"within {self.band_k:g} K of {self.set_point_c:g} degC for {held:.0f} s"
