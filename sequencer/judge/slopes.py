"""Row statistics over masked points: means, least-squares lines, impedances. Pure numpy.

Ordinary least squares I = a + b V per row over the points where the mask holds; the slope's
standard error is the textbook one, sqrt(s^2 / Sxx) with s^2 = SSE / (n - 2) (the same as
scipy.stats.linregress reports).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def masked_mean(x: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(count, mean, sample standard deviation) of each row over its masked points; NaN where
    there are too few points."""
    with np.errstate(divide="ignore", invalid="ignore"):
        count = np.add.reduce(mask, axis=1)
        mean = np.add.reduce(np.where(mask, x, 0.0), axis=1) / count
        dev = np.where(mask, x - mean[:, None], 0.0)
        return count, mean, np.sqrt(np.add.reduce(dev * dev, axis=1) / (count - 1))


@dataclass(frozen=True, eq=False)
class Fit:
    """Per row: slope dI/dV (S), its standard error, and what predicting from the line needs."""

    slope: np.ndarray
    stderr: np.ndarray
    points: np.ndarray
    x_mean: np.ndarray
    y_mean: np.ndarray
    sxx: np.ndarray
    resid_sd: np.ndarray
    x_min: np.ndarray
    x_max: np.ndarray

    def at(self, x: float | np.ndarray) -> np.ndarray:
        """The line's value at x."""
        return self.y_mean + self.slope * (x - self.x_mean)

    def u_at(self, x: float) -> np.ndarray:
        """Standard error of the line's value at x."""
        return self.resid_sd * np.sqrt(1.0 / self.points + (x - self.x_mean) ** 2 / self.sxx)


def window_fit(x: np.ndarray, y: np.ndarray, mask: np.ndarray) -> Fit:
    """Fit every row of x, y (n, k) over its masked points; rows with < 3 points give NaN."""
    with np.errstate(divide="ignore", invalid="ignore"):
        count = np.add.reduce(mask, axis=1)
        x_mean = np.add.reduce(np.where(mask, x, 0.0), axis=1) / count
        y_mean = np.add.reduce(np.where(mask, y, 0.0), axis=1) / count
        dx = np.where(mask, x - x_mean[:, None], 0.0)
        dy = np.where(mask, y - y_mean[:, None], 0.0)
        sxx = np.add.reduce(dx * dx, axis=1)
        slope = np.add.reduce(dx * dy, axis=1) / sxx
        resid = dy - slope[:, None] * dx
        s2 = np.add.reduce(resid * resid, axis=1) / (count - 2)
        few = (count < 3) | ~(sxx > 0)
        x_min = np.minimum.reduce(np.where(mask, x, np.inf), axis=1, initial=np.inf)
        x_max = np.maximum.reduce(np.where(mask, x, -np.inf), axis=1, initial=-np.inf)
        # NaN where too few: the four at once (for one device a call is most of the cost)
        slope, s2, x_min, x_max = np.where(few, np.nan, np.array([slope, s2, x_min, x_max]))
        stderr = np.sqrt(s2 / sxx)
    return Fit(slope, stderr, count, x_mean, y_mean, sxx, np.sqrt(s2), x_min, x_max)


@dataclass(frozen=True, eq=False)
class Impedance:
    value: np.ndarray  # 1 / slope, or the lower bound 1 / (slope + k stderr)
    rel_type_a: np.ndarray  # stderr / slope: the fit's share of u_rel(Z)
    at_least: np.ndarray  # the slope is within k standard errors of zero: a lower bound only
    negative: np.ndarray  # even slope + k stderr <= 0: no impedance at all


def impedance(fit: Fit, k: float = 2.0) -> Impedance:
    """Z = dV/dI. A slope within k standard errors of zero gives only a lower bound."""
    with np.errstate(divide="ignore", invalid="ignore"):
        clear = fit.slope > k * fit.stderr
        ceiling = fit.slope + k * fit.stderr
        bound = ~clear & (ceiling > 0)
        value = np.where(clear, 1.0 / fit.slope, np.where(bound, 1.0 / ceiling, np.nan))
        negative = ~clear & ~bound & ~np.isnan(fit.slope)
        return Impedance(value, fit.stderr / fit.slope, bound, negative)
