"""Coverage factors by the GUM: effective degrees of freedom and Student's t. Pure numpy.

JCGM 100:2008 (GUM) G.4: the expanded uncertainty U = k u with k = t_p(nu_eff), the two-sided
Student t quantile for coverage probability p; nu_eff by the Welch-Satterthwaite formula
(G.2b), nu_eff = u^4 / sum(u_i^4 / nu_i), truncated to the next lower integer (G.4.1 note).
A Type B part from a stated limit taken as exact has nu = infinity (G.4.3).

The t quantile is found by bisection on the closed-form distribution for integer nu
[src: Abramowitz & Stegun, Handbook of Mathematical Functions, 26.7.3 and 26.7.4, from memory]
up to NU_EXACT; above it the Cornish-Fisher expansion in 1/nu (A&S 26.7.5) agrees to better
than 1e-6. Checked against scipy.stats.t.ppf in tests/judge/test_coverage.py.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

NU_EXACT = 300
BISECTIONS = 60


def effective_dof(parts: list[tuple[np.ndarray, np.ndarray | float]]) -> np.ndarray:
    """Welch-Satterthwaite nu_eff of (u_i, nu_i) pairs (u_i already times its sensitivity).
    Infinite when every part with a share has nu = infinity; NaN where the total is unknown."""
    with np.errstate(divide="ignore", invalid="ignore"):
        pairs = [(np.asarray(u, float), np.asarray(nu, float)) for u, nu in parts]
        total = sum(np.square(u) for u, _ in pairs)
        denominator = sum(np.where(u > 0, u**4 / nu, 0.0) for u, nu in pairs)
        return np.where(denominator > 0, np.square(total) / denominator, np.inf)


def coverage_factor(p: float, nu: np.ndarray | float) -> np.ndarray:
    """k = t_p(nu) for each nu (truncated to an integer, at least 1); NaN where nu is NaN or
    below 1 (no information to expand from)."""
    nu = np.asarray(nu, float)
    whole = np.floor(np.where(np.isfinite(nu), nu, 0.0)).astype(np.int64)
    table = _table(p)
    exact = table[np.clip(whole, 0, NU_EXACT)]
    far = _cornish_fisher(p, np.maximum(whole, 1))
    k = np.where(whole <= NU_EXACT, exact, far)
    k = np.where(np.isposinf(nu), _normal_quantile(p), k)
    return np.where(np.isnan(nu) | (nu < 1), np.nan, k)


@lru_cache(maxsize=8)
def _table(p: float) -> np.ndarray:
    """t_p(nu) for nu = 0 (NaN) .. NU_EXACT, once per coverage probability."""
    nu = np.arange(1, NU_EXACT + 1)
    low, high = np.zeros(nu.size), np.full(nu.size, 1e4)
    for _ in range(BISECTIONS * 2):
        mid = (low + high) / 2
        inside = _central(mid, nu) < p
        low, high = np.where(inside, mid, low), np.where(inside, high, mid)
    out = np.concatenate([[np.nan], (low + high) / 2])
    out.flags.writeable = False
    return out


def _central(t: np.ndarray, nu: np.ndarray) -> np.ndarray:
    """P(|T| < t) for Student's t with integer nu (A&S 26.7.3 odd, 26.7.4 even)."""
    theta = np.arctan(t / np.sqrt(nu))
    c2, s = np.cos(theta) ** 2, np.sin(theta)
    odd = nu % 2 == 1
    # The series: odd nu, 1 + 2/3 c2 + (2 4)/(3 5) c2^2 + ... up to c2^((nu-3)/2);
    # even nu, 1 + 1/2 c2 + (1 3)/(2 4) c2^2 + ... up to c2^((nu-2)/2).
    terms = np.where(odd, (nu - 3) // 2, (nu - 2) // 2)
    total, term = np.ones(t.shape), np.ones(t.shape)
    for j in range(1, int(terms.max(initial=0)) + 1):
        ratio = np.where(odd, (2 * j) / (2 * j + 1), (2 * j - 1) / (2 * j))
        term = term * ratio * c2
        total = total + np.where(j <= terms, term, 0.0)
    odd_value = (2 / math.pi) * (theta + np.where(nu > 1, s * np.cos(theta) * total, 0.0))
    return np.where(odd, odd_value, s * total)


def _cornish_fisher(p: float, nu: np.ndarray) -> np.ndarray:
    z = _normal_quantile(p)
    g1 = (z**3 + z) / 4
    g2 = (5 * z**5 + 16 * z**3 + 3 * z) / 96
    g3 = (3 * z**7 + 19 * z**5 + 17 * z**3 - 15 * z) / 384
    return z + g1 / nu + g2 / nu**2 + g3 / nu**3


@lru_cache(maxsize=8)
def _normal_quantile(p: float) -> float:
    """The two-sided normal quantile: P(|Z| < z) = p, by bisection on erf."""
    low, high = 0.0, 40.0
    for _ in range(BISECTIONS * 2):
        mid = (low + high) / 2
        low, high = (mid, high) if math.erf(mid / math.sqrt(2)) < p else (low, mid)
    return (low + high) / 2
