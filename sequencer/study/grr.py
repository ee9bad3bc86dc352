"""Gauge repeatability and reproducibility (crossed study: parts x appraisers x repeats).

An appraiser is whatever is suspected of changing the reading: an operator, a station or a
fixture. The ANOVA method splits the variance of every reading into part-to-part, appraiser,
part-by-appraiser interaction and repeatability; the average-and-range method estimates the same
spreads from ranges, as done by hand. Pure numpy/scipy: the caller hands in readings.

Thresholds and defaults are the automotive measurement-system manual's rules of thumb (AIAG MSA
reference manual, 4th edition; from memory), not laws: under 10 % acceptable, 10 to 30 % may be
acceptable depending on the use, over 30 % not acceptable; at least 5 distinct categories.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from scipy import stats

from sequencer.model.errors import StudyError

# 10 parts x 3 appraisers x 3 repeats: common practice, no source (the manual's usual layout).
DEFAULT_PARTS, DEFAULT_APPRAISERS, DEFAULT_REPEATS = 10, 3, 3
MIN_PARTS, MIN_APPRAISERS, MIN_REPEATS = 2, 2, 2
# The manual pools the interaction into repeatability when its F test is not significant at
# this level (from memory: AIAG MSA 4th ed. uses 0.25).
POOL_INTERACTION_ABOVE_P = 0.25
# Spreads are quoted as 6 standard deviations (AIAG MSA 4th ed.; older editions used 5.15).
SPREAD_SIGMAS = 6.0


@dataclass(frozen=True, kw_only=True)
class AnovaRow:
    source: str
    df: int
    ss: float
    ms: float
    f: float | None
    p: float | None


@dataclass(frozen=True, kw_only=True)
class GaugeStudy:
    """Standard deviations of each component (same unit as the readings) and the ratios."""

    method: str
    parts: int
    appraisers: int
    repeats: int
    repeatability: float  # EV: equipment variation
    reproducibility: float  # AV: appraiser variation (with the interaction, if kept)
    interaction: float
    grr: float
    part_to_part: float  # PV
    total: float  # TV
    pct_grr_of_total: float
    pct_grr_of_tolerance: float | None
    distinct_categories: int
    interaction_pooled: bool = False
    anova: tuple[AnovaRow, ...] = ()
    # (component, low, high) standard deviations, 95 %; ANOVA method only
    intervals: tuple[tuple[str, float, float], ...] = ()

    @property
    def verdict(self) -> str:
        return acceptance(self.pct_grr_of_total)


def acceptance(pct_grr: float) -> str:
    """The manual's rule of thumb (AIAG MSA 4th ed., from memory)."""
    if pct_grr < 10.0:
        return "acceptable"
    if pct_grr <= 30.0:
        return "may be acceptable, depending on the use"
    return "not acceptable"


def readings_table(
    records: Iterable[tuple[str, str, float]],
) -> tuple[np.ndarray, list[str], list[str]]:
    """(part, appraiser, value) records -> array [part, appraiser, repeat], part and appraiser
    names in first-seen order. Refuses unbalanced or too small studies with what to measure."""
    cells: dict[tuple[str, str], list[float]] = {}
    for part, who, value in records:
        if not np.isfinite(value):
            raise StudyError(f"part {part}, {who}: reading {value} is not a number")
        cells.setdefault((part, who), []).append(float(value))
    parts = list(dict.fromkeys(p for p, _ in cells))
    appraisers = list(dict.fromkeys(w for _, w in cells))
    _check_size(len(parts), len(appraisers))
    counts = Counter()
    for p in parts:
        for w in appraisers:
            counts[len(cells.get((p, w), []))] += 1
    if len(counts) > 1:
        repeats = max(counts, key=lambda n: (counts[n], n))
        odd = [
            f"{p}/{w} has {len(cells.get((p, w), []))}"
            for p in parts
            for w in appraisers
            if len(cells.get((p, w), [])) != repeats
        ]
        raise StudyError(
            f"unbalanced study: every part needs {repeats} readings by every appraiser; "
            f"{', '.join(odd[:4])}{' ...' if len(odd) > 4 else ''}: measure the missing ones "
            "or drop the extra ones"
        )
    table = np.array([[cells[(p, w)] for w in appraisers] for p in parts])
    _check_size(*table.shape)
    return table, parts, appraisers


def _check_size(parts: int, appraisers: int, repeats: int = MIN_REPEATS) -> None:
    for what, n, least in (
        ("parts", parts, MIN_PARTS),
        ("appraisers (operators, stations or fixtures)", appraisers, MIN_APPRAISERS),
        ("repeats per part and appraiser", repeats, MIN_REPEATS),
    ):
        if n < least:
            raise StudyError(
                f"a gauge study needs at least {least} {what} (got {n}); "
                f"common practice is {DEFAULT_PARTS} parts x {DEFAULT_APPRAISERS} appraisers "
                f"x {DEFAULT_REPEATS} repeats"
            )


def anova_table(y: np.ndarray) -> tuple[AnovaRow, ...]:
    """Two-way crossed ANOVA with interaction, both factors random (F tests as for random
    effects: parts and appraisers against the interaction, the interaction against repeats)."""
    p, o, r = y.shape
    grand = y.mean()
    part_means, op_means, cell_means = y.mean(axis=(1, 2)), y.mean(axis=(0, 2)), y.mean(axis=2)
    ss_part = o * r * np.sum((part_means - grand) ** 2)
    ss_op = p * r * np.sum((op_means - grand) ** 2)
    ss_cells = r * np.sum((cell_means - grand) ** 2)
    ss_int = max(ss_cells - ss_part - ss_op, 0.0)
    ss_err = np.sum((y - cell_means[:, :, None]) ** 2)
    df_part, df_op, df_int, df_err = p - 1, o - 1, (p - 1) * (o - 1), p * o * (r - 1)
    ms_part, ms_op = ss_part / df_part, ss_op / df_op
    ms_int, ms_err = ss_int / df_int, ss_err / df_err
    return (
        _row("part", df_part, ss_part, ms_part, ms_int, df_int),
        _row("appraiser", df_op, ss_op, ms_op, ms_int, df_int),
        _row("part x appraiser", df_int, ss_int, ms_int, ms_err, df_err),
        AnovaRow(source="repeatability", df=df_err, ss=ss_err, ms=ms_err, f=None, p=None),
    )


def _row(source: str, df: int, ss: float, ms: float, ms_den: float, df_den: int) -> AnovaRow:
    f = ms / ms_den if ms_den > 0 else float("inf")
    p = float(stats.f.sf(f, df, df_den)) if np.isfinite(f) else 0.0
    return AnovaRow(source=source, df=df, ss=float(ss), ms=float(ms), f=float(f), p=p)


def variance_components(y: np.ndarray, *, pool: bool | None = None) -> dict[str, float]:
    """Variances of repeatability, appraiser, interaction and part (negative estimates set to
    zero, as is usual). `pool=None` pools the interaction when its p-value exceeds 0.25."""
    rows = {row.source: row for row in anova_table(y)}
    p, o, r = y.shape
    inter = rows["part x appraiser"]
    if pool is None:
        pool = inter.p is not None and inter.p > POOL_INTERACTION_ABOVE_P
    if pool:
        err = rows["repeatability"]
        ms_e = (err.ss + inter.ss) / (err.df + inter.df)
        ms_i, var_int = ms_e, 0.0
    else:
        ms_e, ms_i = rows["repeatability"].ms, inter.ms
        var_int = max((ms_i - ms_e) / r, 0.0)
    return {
        "repeatability": ms_e,
        "appraiser": max((rows["appraiser"].ms - ms_i) / (p * r), 0.0),
        "interaction": var_int,
        "part": max((rows["part"].ms - ms_i) / (o * r), 0.0),
        "pooled": float(pool),
    }


def anova_study(y: np.ndarray, *, tolerance: float | None = None) -> GaugeStudy:
    """The ANOVA method on readings [part, appraiser, repeat]."""
    y = np.asarray(y, dtype=float)
    _check_shape(y)
    v = variance_components(y)
    return _study(
        "ANOVA",
        y.shape,
        ev=np.sqrt(v["repeatability"]),
        av=np.sqrt(v["appraiser"] + v["interaction"]),
        inter=np.sqrt(v["interaction"]),
        pv=np.sqrt(v["part"]),
        tolerance=tolerance,
        pooled=bool(v["pooled"]),
        anova=anova_table(y),
        intervals=component_intervals(y, pooled=bool(v["pooled"])),
    )


def component_intervals(
    y: np.ndarray, *, pooled: bool, confidence: float = 0.95
) -> tuple[tuple[str, float, float], ...]:
    """Confidence intervals of the standard deviations: exact (chi-square) for repeatability;
    Satterthwaite's approximate degrees of freedom for the components that are differences of
    mean squares (Satterthwaite 1946; as in Burdick and Larsen, J. Qual. Technol. 1997; from
    memory). Approximate: with 2 or 3 appraisers the reproducibility interval is wide."""
    rows = {row.source: row for row in anova_table(y)}
    p, o, r = y.shape
    err, inter = rows["repeatability"], rows["part x appraiser"]
    if pooled:
        ms_e, df_e = (err.ss + inter.ss) / (err.df + inter.df), err.df + inter.df
    else:
        ms_e, df_e = err.ms, err.df
    # Each component as sum of c * MS terms: (c, MS, df).
    ms_i, df_i = (ms_e, df_e) if pooled else (inter.ms, inter.df)
    terms = {
        "repeatability": [(1.0, ms_e, df_e)],
        "reproducibility": [(1 / (p * r), rows["appraiser"].ms, rows["appraiser"].df)]
        + ([] if pooled else [(1 / r - 1 / (p * r), ms_i, df_i), (-1 / r, ms_e, df_e)])
        + ([(-1 / (p * r), ms_i, df_i)] if pooled else []),
        "part to part": [
            (1 / (o * r), rows["part"].ms, rows["part"].df),
            (-1 / (o * r), ms_i, df_i),
        ],
    }
    return tuple((name, *_satterthwaite(t, confidence)) for name, t in terms.items())


def _satterthwaite(terms: list[tuple[float, float, int]], confidence: float) -> tuple[float, float]:
    var = sum(c * ms for c, ms, _ in terms)
    if var <= 0:
        return 0.0, float("nan")  # the estimate is zero: no upper bound from this method
    df = var**2 / sum((c * ms) ** 2 / d for c, ms, d in terms)
    tail = (1 - confidence) / 2
    low = df * var / stats.chi2.ppf(1 - tail, df)
    bottom = stats.chi2.ppf(tail, df)  # 0 for very few degrees of freedom: no upper bound
    high = df * var / bottom if bottom > 0 else float("inf")
    return float(np.sqrt(low)), float(np.sqrt(high))


def _check_shape(y: np.ndarray) -> None:
    if y.ndim != 3:
        raise StudyError("gauge study readings must be a table [part, appraiser, repeat]")
    if not np.all(np.isfinite(y)):
        raise StudyError("gauge study readings include a value that is not a number")
    _check_size(*y.shape)


def _study(
    method, shape, *, ev, av, inter, pv, tolerance, pooled=False, anova=(), intervals=()
) -> GaugeStudy:
    grr = float(np.hypot(ev, av))
    tv = float(np.hypot(grr, pv))
    if tolerance is not None and not tolerance > 0:
        raise StudyError(
            f"the tolerance (upper minus lower limit) must be positive (got {tolerance})"
        )
    return GaugeStudy(
        method=method,
        parts=shape[0],
        appraisers=shape[1],
        repeats=shape[2],
        repeatability=float(ev),
        reproducibility=float(av),
        interaction=float(inter),
        grr=grr,
        part_to_part=float(pv),
        total=tv,
        pct_grr_of_total=100.0 * grr / tv if tv > 0 else float("nan"),
        pct_grr_of_tolerance=None if tolerance is None else 100.0 * SPREAD_SIGMAS * grr / tolerance,
        distinct_categories=distinct_categories(pv, grr),
        interaction_pooled=pooled,
        anova=tuple(anova),
        intervals=tuple(intervals),
    )


def distinct_categories(pv: float, grr: float) -> int:
    """ndc = 1.41 PV/GRR, truncated (AIAG MSA 4th ed., from memory; 1.41 is sqrt 2)."""
    if grr <= 0:
        return 0 if pv <= 0 else 10**6
    return int(np.floor(1.41 * pv / grr))


# 1/d2* for the average-and-range method, AIAG MSA 4th ed. tables (from memory). K1 uses d2 for
# many subgroups (ranges of r repeats over every part and appraiser); K2 and K3 use d2* for one
# subgroup (the range of the appraiser averages, the range of the part averages).
K1 = {2: 0.8862, 3: 0.5908}
K2 = {2: 0.7071, 3: 0.5231}
K3 = {
    2: 0.7071,
    3: 0.5231,
    4: 0.4467,
    5: 0.4030,
    6: 0.3742,
    7: 0.3534,
    8: 0.3375,
    9: 0.3249,
    10: 0.3146,
}


def range_study(y: np.ndarray, *, tolerance: float | None = None) -> GaugeStudy:
    """The average-and-range method (as done by hand on the manual's form)."""
    y = np.asarray(y, dtype=float)
    _check_shape(y)
    p, o, r = y.shape
    for table, n, what in ((K1, r, "repeats"), (K2, o, "appraisers"), (K3, p, "parts")):
        if n not in table:
            raise StudyError(
                f"the average-and-range method has constants for {min(table)} to {max(table)} "
                f"{what} (got {n}); use the ANOVA method"
            )
    r_bar = np.ptp(y, axis=2).mean()
    x_diff = np.ptp(y.mean(axis=(0, 2)))
    r_parts = np.ptp(y.mean(axis=(1, 2)))
    ev = r_bar * K1[r]
    av = np.sqrt(max((x_diff * K2[o]) ** 2 - ev**2 / (p * r), 0.0))
    pv = r_parts * K3[p]
    return _study("average and range", y.shape, ev=ev, av=av, inter=0.0, pv=pv, tolerance=tolerance)
