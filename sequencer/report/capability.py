"""Process capability of one figure against its limits. Pure: floats and numpy arrays in.

Formulas [src: NIST/SEMATECH e-Handbook of Statistical Methods, 6.1.6, as quoted in
REFERENCES.md s5]: Cp = (USL - LSL) / 6s, Cpu = (USL - mean) / 3s, Cpl = (mean - LSL) / 3s,
Cpk = min(Cpu, Cpl); with one limit only, Cpk is that side's index and Cp is undefined. s is the
sample standard deviation (n - 1 in the denominator).

Confidence interval of Cpk: Bissell's normal approximation, Cpk +- z sqrt(1/(9n) +
Cpk^2 / (2(n - 1))), as the e-Handbook gives it in 6.1.6 [from memory]; it is checked by
simulation in the tests. Fallout: the normal model's share outside the limits,
Phi((LSL - mean)/s) + 1 - Phi((USL - mean)/s), in parts per million. Both assume a normal,
stable process; a lot of twenty parts gives a wide interval, which is the point of showing it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

NAN = math.nan


@dataclass(frozen=True)
class Capability:
    n: int
    mean: float
    s: float
    lsl: float | None
    usl: float | None
    cp: float  # NaN unless both limits are given
    cpk: float
    cpk_low: float  # confidence interval of Cpk
    cpk_high: float
    ppm: float  # normal-model fallout outside the limits
    confidence: float = 0.95

    @property
    def sides(self) -> int:
        return (self.lsl is not None) + (self.usl is not None)


# Below this many parts a capability index says nothing about the process (common practice,
# no source; 25 or more are usually asked for): no index rather than a misleading one.
MIN_SAMPLES = 5


def cp(lsl: float, usl: float, s: float) -> float:
    return (usl - lsl) / (6 * s) if s > 0 else NAN


def cpk(lsl: float | None, usl: float | None, mean: float, s: float) -> float:
    """The smaller of the one-sided indices of the limits that are given."""
    if not s > 0 or (lsl is None and usl is None):
        return NAN
    sides = []
    if usl is not None:
        sides.append((usl - mean) / (3 * s))
    if lsl is not None:
        sides.append((mean - lsl) / (3 * s))
    return min(sides)


def cpk_interval(index: float, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Bissell's approximate two-sided interval of Cpk (NIST/SEMATECH 6.1.6, from memory)."""
    if n < 2 or math.isnan(index):
        return NAN, NAN
    z = NormalDist().inv_cdf(0.5 + confidence / 2)
    half = z * math.sqrt(1 / (9 * n) + index**2 / (2 * (n - 1)))
    return index - half, index + half


def upper_tail(z: float) -> float:
    """1 - Phi(z), accurate far into the tail (erfc, not 1 - cdf)."""
    return 0.5 * math.erfc(z / math.sqrt(2))


def fallout_ppm(lsl: float | None, usl: float | None, mean: float, s: float) -> float:
    """Expected parts per million outside the limits if the figure is normal(mean, s)."""
    if not s > 0 or (lsl is None and usl is None):
        return NAN
    share = 0.0
    if lsl is not None:
        share += upper_tail((mean - lsl) / s)
    if usl is not None:
        share += upper_tail((usl - mean) / s)
    return 1e6 * share


def capability(
    values: np.ndarray,
    lsl: float | None,
    usl: float | None,
    confidence: float = 0.95,
) -> Capability:
    """Every index of one figure; NaN where the sample is too small or has no spread."""
    x = np.asarray(values, float)
    x = x[np.isfinite(x)]
    n = len(x)
    mean = float(x.mean()) if n else NAN
    s = float(x.std(ddof=1)) if n >= MIN_SAMPLES else NAN
    both = lsl is not None and usl is not None
    index = cpk(lsl, usl, mean, s)
    low, high = cpk_interval(index, n, confidence)
    return Capability(
        n,
        mean,
        s,
        lsl,
        usl,
        cp(lsl, usl, s) if both else NAN,  # type: ignore[arg-type]
        index,
        low,
        high,
        fallout_ppm(lsl, usl, mean, s),
        confidence,
    )


def observed_ppm(values: np.ndarray, lsl: float | None, usl: float | None) -> float:
    """Parts per million of the values that lie outside the limits (counted, not modelled)."""
    x = np.asarray(values, float)
    x = x[np.isfinite(x)]
    if not len(x) or (lsl is None and usl is None):
        return NAN
    out = np.zeros(len(x), bool)
    if lsl is not None:
        out |= x < lsl
    if usl is not None:
        out |= x > usl
    return 1e6 * float(out.mean())
