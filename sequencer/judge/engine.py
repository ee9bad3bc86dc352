"""The judge: figures of the trade with their uncertainties, a verdict and a bin. Pure numpy.

Sign convention (REFERENCES.md): V = V(anode) - V(cathode), I > 0 from anode to cathode.
Points taken while the SMU was clamping at its compliance are never used for a figure; where a
figure would need them, the figure is missing and the reason says why.

One engine serves one curve and a whole lot: `judge_arrays` takes the readings of many devices
that followed one plan as (devices x points) arrays; `judge_curve` is the same engine on one row,
so a lot judged at once and device by device give the same figures.
"""

from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field, fields

import numpy as np

from sequencer.judge import reasons as words
from sequencer.judge.bins import assign, soft_bin
from sequencer.judge.decide import Decisions, decide
from sequencer.judge.figures import SPOT_MATCH_V, FigureArrays, Layout, Readings, compute
from sequencer.judge.slopes import Fit, impedance, window_fit
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import (
    CLASSIFICATIONS,
    FIGURE_INFO,
    FIGURES,
    VERDICTS,
    JudgeSettings,
)

CHUNK_ROWS = 2048  # rows judged together: big enough for numpy, small enough for the cache
# Figure -> (label, unit symbol) for people; kept for callers of the first judge.
LABELS = {
    name: (label, {"ohm": "Ω"}.get(unit, unit)) for name, (_, unit, label) in FIGURE_INFO.items()
}


@dataclass(frozen=True)
class Figure:
    """A figure with its standard uncertainty. `at_least` marks a lower bound: an impedance
    whose slope is within noise is reported as "at least", never as a made-up number."""

    value: float
    uncertainty: float = math.nan
    at_least: bool = False
    coverage_factor: float = math.nan  # k of U = k u (Student's t at dof, or the recipe's k)
    dof: float = math.nan  # effective degrees of freedom of u (inf: Type B only)

    @property
    def known(self) -> bool:
        return not math.isnan(self.value)

    @property
    def expanded(self) -> float:
        """U = k u: the half-width of the interval that holds the true value with the
        recipe's coverage probability (NaN where u is unknown)."""
        return self.coverage_factor * self.uncertainty


MISSING = Figure(math.nan)


@dataclass(frozen=True)
class Judgement:
    """One device: figures, classification, reasons (failing) and guard-band notes, and bins."""

    device: str
    figures: dict[str, Figure]
    classification: str  # one of CLASSIFICATIONS
    reasons: tuple[str, ...] = field(default=())
    guard_band: tuple[str, ...] = field(default=())
    hard_bin: int | None = None
    bin_class: str = ""
    soft_bin: str = ""

    @property
    def verdict(self) -> str:
        """pass, fail, guard-band (within U of a limit, neither passed nor failed), or aborted
        (the device was not measured to the end)."""
        if self.classification == "aborted":
            return "aborted"
        if self.reasons:
            return "fail"
        return "guard-band" if self.guard_band else "pass"

    @property
    def notes(self) -> tuple[str, ...]:
        return self.reasons + self.guard_band


@dataclass(frozen=True, eq=False)
class LotResult:
    """Everything the judge decided about a group of devices, as arrays."""

    figures: FigureArrays
    decisions: Decisions
    bin_rule: np.ndarray  # index into settings.bins
    settings: JudgeSettings

    def __len__(self) -> int:
        return len(self.bin_rule)

    def verdicts(self) -> list[str]:
        return [VERDICTS[v] for v in self.decisions.verdict]

    def hard_bins(self) -> np.ndarray:
        return np.array([r.number for r in self.settings.bins])[self.bin_rule]

    def judgement(self, k: int, device: str) -> Judgement:
        """The judgement of row k, in words."""
        f, d, s = self.figures, self.decisions, self.settings
        figs = {
            name: Figure(
                float(f.value[name][k]),
                float(f.u[name][k]),
                bool(f.at_least[name][k]),
                float(f.k[name][k]),
                float(f.nu[name][k]) if not math.isnan(f.u[name][k]) else math.nan,
            )
            for name in FIGURES
        }
        failing, guard = _reasons(self, k)
        rule = s.bins[int(self.bin_rule[k])]
        verdict = VERDICTS[d.verdict[k]]
        first = (failing + guard)[0][0] if failing or guard else ""
        return Judgement(
            device,
            figs,
            CLASSIFICATIONS[d.classification[k]],
            tuple(text for _, text in failing),
            tuple(text for _, text in guard),
            rule.number,
            rule.klass,
            soft_bin(rule, first, verdict),
        )


def _reasons(lot: LotResult, k: int) -> tuple[list, list]:
    f, d, s = lot.figures, lot.decisions, lot.settings
    failing: list[tuple[str, str]] = []
    guard: list[tuple[str, str]] = []
    if f.shape[k]:
        failing.append(words.shape_reason(int(f.shape[k]), float(f.shape_value[k]), s))
    for name in s.required():
        code = int(f.missing[name][k])
        if code:
            ref = float(f.knee_reference_a[k])
            failing.append(words.missing_reason(name, code, s, ref))
    for limit in s.limits:
        status = int(d.status[limit.figure][k])
        if status:
            value = float(f.value[limit.figure][k])
            big_u = float(d.expanded[limit.figure][k])
            bound = bool(f.at_least[limit.figure][k])
            kind, text, in_band = words.limit_reason(
                limit.figure, status, value, limit, big_u, bound
            )
            (guard if in_band else failing).append((kind, text))
    return failing, guard


def judge_arrays(
    layout: Layout,
    voltage: np.ndarray,
    current: np.ndarray,
    clamped: np.ndarray,
    settings: JudgeSettings,
) -> LotResult:
    """Judge every row of (devices x points) readings that followed one plan (`layout`).

    Rows go in chunks; with more than one chunk they are spread over the machine's cores
    (numpy releases the interpreter lock inside its loops)."""

    def chunk(start: int):
        rows = slice(start, start + CHUNK_ROWS)
        r = Readings(layout, voltage[rows], current[rows], np.asarray(clamped[rows], bool))
        f = compute(r, settings)
        d = decide(f, settings)
        return f, d, assign(settings.bins, d.verdict, d.classification, f.value, f.at_least)

    starts = range(0, max(voltage.shape[0], 1), CHUNK_ROWS)
    if len(starts) == 1:
        return LotResult(*chunk(0), settings)
    with ThreadPoolExecutor(max_workers=min(len(starts), os.cpu_count() or 1)) as pool:
        parts = list(pool.map(chunk, starts))
    return LotResult(
        _concat([p[0] for p in parts]),
        _concat([p[1] for p in parts]),
        np.concatenate([p[2] for p in parts]),
        settings,
    )


def _concat(items: list):
    """Join chunk results field by field (arrays, or dicts of arrays)."""
    first = items[0]
    joined = {}
    for item in fields(first):
        values = [getattr(x, item.name) for x in items]
        if isinstance(values[0], dict):
            joined[item.name] = {k: np.concatenate([v[k] for v in values]) for k in values[0]}
        else:
            joined[item.name] = np.concatenate(values)
    return type(first)(**joined)


def judge_curve(curve: Curve, settings: JudgeSettings) -> Judgement:
    """All figures of one device, the verdict against the settings' limits, and its bin."""
    lot = judge_arrays(
        Layout.shared(curve),
        curve.voltage_v[None, :],
        curve.current_a[None, :],
        curve.in_compliance[None, :],
        settings,
    )
    return lot.judgement(0, curve.device)


def with_bin(judgement: Judgement, settings: JudgeSettings) -> Judgement:
    """Bin a judgement made elsewhere (an aborted device, a stored one)."""
    values = {n: np.array([judgement.figures[n].value]) for n in FIGURES}
    at_least = {n: np.array([judgement.figures[n].at_least]) for n in FIGURES}
    verdict = np.array([VERDICTS.index(judgement.verdict)])
    kind = np.array([CLASSIFICATIONS.index(judgement.classification)])
    rule = settings.bins[int(assign(settings.bins, verdict, kind, values, at_least)[0])]
    first = judgement.notes[0].split(":")[0] if judgement.notes else ""
    return Judgement(
        judgement.device,
        judgement.figures,
        judgement.classification,
        judgement.reasons,
        judgement.guard_band,
        rule.number,
        rule.klass,
        soft_bin(rule, first, judgement.verdict),
    )


# --- one line through points: kept for callers that fit a single set of points -------------


@dataclass(frozen=True)
class Slope:
    slope: float  # dI/dV, siemens
    stderr: float
    points: int


def fit_slope(voltage_v: np.ndarray, current_a: np.ndarray) -> Slope:
    """Least-squares line I = a + b V; b and its standard error (ordinary least squares)."""
    v = np.asarray(voltage_v, float)[None, :]
    fit = window_fit(v, np.asarray(current_a, float)[None, :], np.ones(v.shape, bool))
    return Slope(float(fit.slope[0]), float(fit.stderr[0]), int(fit.points[0]))


def impedance_from_slope(fit: Slope, k: float = 2.0) -> Figure:
    """Z = dV/dI with its Type A uncertainty; a slope within k standard errors of zero gives
    only a lower bound."""
    one = np.array([fit.slope]), np.array([fit.stderr])
    nan = np.array([math.nan])
    z = impedance(Fit(*one, np.array([fit.points]), nan, nan, nan, nan, nan, nan), k)
    if z.at_least[0]:
        return Figure(float(z.value[0]), math.nan, at_least=True)
    value = float(z.value[0])
    return Figure(value, value * abs(float(z.rel_type_a[0])))


__all__ = [
    "LABELS",
    "MISSING",
    "SPOT_MATCH_V",
    "Figure",
    "Judgement",
    "LotResult",
    "Slope",
    "fit_slope",
    "impedance_from_slope",
    "judge_arrays",
    "judge_curve",
    "with_bin",
]
