"""Temperature coefficient of a figure (the regulated current first) from readings over temperature.

A straight line I(T) = I_ref + a (T - T_ref) is fitted by ordinary least squares; a is the
coefficient in A/K and a / I_ref the relative one, reported in %/K. The standard uncertainty of a
comes from the residual scatter (the usual OLS covariance, s^2 (X^T X)^-1); with exactly two
temperatures there is no scatter to estimate it from, so the uncertainty is taken from the
readings' own uncertainty when given, else left as NaN (the caller says "not known", not zero).
The reference temperature is the station's T_ref (25 degC by default; common practice, no source).
Pure numpy: no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

T_REF_K = 298.15  # 25 degC, the usual data-sheet reference (common practice, no source)


@dataclass(frozen=True)
class TempCo:
    """A fitted temperature coefficient and its standard uncertainty."""

    a_per_k: float  # A/K (or the figure's unit per kelvin)
    u_a_per_k: float  # standard uncertainty of a_per_k; NaN when it cannot be known
    value_at_ref: float  # the fitted figure at ref_k
    ref_k: float
    points: int

    @property
    def pct_per_k(self) -> float:
        """Relative coefficient in %/K, referred to the fitted value at the reference."""
        return 100.0 * self.a_per_k / self.value_at_ref

    @property
    def u_pct_per_k(self) -> float:
        """Uncertainty of pct_per_k (the reference value's own uncertainty is second order)."""
        return 100.0 * self.u_a_per_k / abs(self.value_at_ref)


def fit_tempco(
    temps_k: Sequence[float],
    values: Sequence[float],
    u_values: Sequence[float] | None = None,
    ref_k: float = T_REF_K,
) -> TempCo:
    """Least-squares line through (temperature, value); needs two or more distinct temperatures."""
    t = np.asarray(temps_k, dtype=float)
    y = np.asarray(values, dtype=float)
    if t.shape != y.shape or t.size < 2 or np.ptp(t) == 0:
        raise ValueError("a temperature coefficient needs readings at two or more temperatures")
    x = np.column_stack([np.ones_like(t), t - ref_k])
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    inv = np.linalg.inv(x.T @ x)
    return TempCo(float(coef[1]), _slope_uncertainty(x, y, coef, inv, u_values),
                  float(coef[0]), ref_k, int(t.size))  # fmt: skip


def _slope_uncertainty(x, y, coef, inv, u_values) -> float:
    dof = len(y) - 2
    if dof > 0:
        residual = y - x @ coef
        return math.sqrt(float(residual @ residual) / dof * inv[1, 1])
    if u_values is not None:
        # No scatter to learn from: carry the readings' own uncertainty through the line.
        u = np.asarray(u_values, dtype=float)
        weights = inv @ x.T  # coef = weights @ y
        return math.sqrt(float(np.sum((weights[1] * u) ** 2)))
    return math.nan


def zero_tc_value(levels: Sequence[float], coefficients: Sequence[float]) -> float | None:
    """The level (e.g. current) at which the coefficient crosses zero, or None if not bracketed.

    `levels` are the figure's values at the reference (one per device or bias setting),
    `coefficients` their fitted temperature coefficients. Between the two neighbours (sorted by
    level) whose coefficients change sign the crossing is interpolated linearly; the data must
    bracket it, since extrapolating a zero-coefficient point is a guess, not a measurement.
    """
    order = np.argsort(np.asarray(levels, dtype=float))
    lv = np.asarray(levels, dtype=float)[order]
    tc = np.asarray(coefficients, dtype=float)[order]
    for i in range(len(lv) - 1):
        if tc[i] == 0.0:
            return float(lv[i])
        if tc[i] * tc[i + 1] < 0:
            return float(lv[i] - tc[i] * (lv[i + 1] - lv[i]) / (tc[i + 1] - tc[i]))
    if len(lv) and tc[-1] == 0.0:
        return float(lv[-1])
    return None
