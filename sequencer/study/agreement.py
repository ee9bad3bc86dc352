"""Station-to-station agreement: the same parts measured on a reference station (x) and a
station under test (y).

Both readings carry errors, so ordinary least squares (which puts all the error on y) would bias
the slope towards zero; Deming regression takes the ratio of the two error variances (1 gives
orthogonal regression). Confidence intervals by the jackknife (Linnet, Clin. Chem. 1990, from
memory). Bland-Altman limits of agreement: bias +/- 1.96 standard deviations of the differences
(Bland and Altman, Lancet 1986, from memory). Pure numpy/scipy.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from sequencer.model.errors import StudyError

MIN_PAIRS = 5  # below this the jackknife intervals mean little: common practice, no source
LOA_SIGMAS = 1.96  # 95 % of differences for normal errors (Bland and Altman 1986)


@dataclass(frozen=True, kw_only=True)
class Interval:
    value: float
    low: float
    high: float

    def contains(self, x: float) -> bool:
        return self.low <= x <= self.high


@dataclass(frozen=True, kw_only=True)
class Agreement:
    pairs: int
    slope: Interval
    offset: Interval  # intercept: y = offset + slope x
    bias: Interval  # mean of y - x
    lower_limit: float  # limits of agreement
    upper_limit: float
    tolerance: float | None
    agrees: bool | None  # None: no tolerance given
    differences: tuple[str, ...]  # what kind of disagreement the intervals show
    verdict: str


def deming(x: np.ndarray, y: np.ndarray, error_ratio: float = 1.0) -> tuple[float, float]:
    """(slope, intercept); `error_ratio` = variance of y's errors / variance of x's errors."""
    mx, my = x.mean(), y.mean()
    sxx, syy = np.mean((x - mx) ** 2), np.mean((y - my) ** 2)
    sxy = np.mean((x - mx) * (y - my))
    if sxy == 0:
        raise StudyError(
            "the two stations' readings do not vary together: use parts that span the range"
        )
    d = syy - error_ratio * sxx
    slope = (d + np.sqrt(d * d + 4 * error_ratio * sxy * sxy)) / (2 * sxy)
    return float(slope), float(my - slope * mx)


def jackknife(
    x: np.ndarray, y: np.ndarray, error_ratio: float, confidence: float
) -> tuple[Interval, Interval]:
    n = len(x)
    full = np.array(deming(x, y, error_ratio))
    keep = ~np.eye(n, dtype=bool)
    leave_one = np.array([deming(x[k], y[k], error_ratio) for k in keep])
    pseudo = n * full - (n - 1) * leave_one
    centre = pseudo.mean(axis=0)
    half = stats.t.ppf(0.5 + confidence / 2, n - 1) * pseudo.std(axis=0, ddof=1) / np.sqrt(n)
    slope, offset = (
        Interval(
            value=float(full[i]), low=float(centre[i] - half[i]), high=float(centre[i] + half[i])
        )
        for i in range(2)
    )
    return slope, offset


def compare(
    reference: ArrayLike,
    candidate: ArrayLike,
    *,
    tolerance: float | None = None,
    error_ratio: float = 1.0,
    confidence: float = 0.95,
) -> Agreement:
    """Readings of the same parts, in the same order, on the two stations."""
    x, y = np.asarray(reference, dtype=float), np.asarray(candidate, dtype=float)
    _check(x, y, tolerance)
    slope, offset = jackknife(x, y, error_ratio, confidence)
    d = y - x
    n = len(d)
    sd = d.std(ddof=1)
    half = stats.t.ppf(0.5 + confidence / 2, n - 1) * sd / np.sqrt(n)
    bias = Interval(value=float(d.mean()), low=float(d.mean() - half), high=float(d.mean() + half))
    low, high = bias.value - LOA_SIGMAS * sd, bias.value + LOA_SIGMAS * sd
    return Agreement(
        pairs=n,
        slope=slope,
        offset=offset,
        bias=bias,
        lower_limit=float(low),
        upper_limit=float(high),
        tolerance=tolerance,
        agrees=None if tolerance is None else bool(-tolerance <= low and high <= tolerance),
        differences=differences(slope, bias),
        verdict=verdict(low, high, slope, bias, tolerance),
    )


def verdict(
    low: float, high: float, slope: Interval, bias: Interval, tolerance: float | None
) -> str:
    """The stations agree when 95 % of differences fall within +/- tolerance; the slope and the
    bias say what kind of disagreement it is."""
    kinds = differences(slope, bias)
    found = f"; found {' and '.join(kinds)}" if kinds else ""
    if tolerance is None:
        return f"no tolerance given{found}"
    if -tolerance <= low and high <= tolerance:
        return f"agree within +/-{tolerance:g}{found}"
    return f"do not agree within +/-{tolerance:g}{found}"


def differences(slope: Interval, bias: Interval) -> tuple[str, ...]:
    kinds = []
    if not slope.contains(1.0):
        kinds.append("a proportional difference (slope not 1)")
    if not bias.contains(0.0):
        kinds.append("a constant offset (bias not 0)")
    return tuple(kinds)


def _check(x: np.ndarray, y: np.ndarray, tolerance: float | None) -> None:
    if x.shape != y.shape or x.ndim != 1:
        raise StudyError(
            "station comparison needs the same parts on both stations "
            f"(got {x.size} and {y.size} readings)"
        )
    if len(x) < MIN_PAIRS:
        raise StudyError(f"station comparison needs at least {MIN_PAIRS} parts (got {len(x)})")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise StudyError("station comparison readings include a value that is not a number")
    if tolerance is not None and not tolerance > 0:
        raise StudyError(f"the agreement tolerance must be positive (got {tolerance})")
