"""What the judge computes, against which limits, under which decision rule, into which bins.

Frozen dataclasses of SI floats; the recipe format reads them from a recipe's `judge:` section
(sequencer.recipe.format.recipe, recipebuild).
Defaults are the trade's usual conditions: test voltage 25 V, knee voltage 6 V, limiting voltage
at 0.8 x the measured regulated current (REFERENCES.md s1, [src: MIL-PRF-19500/463 as reproduced
in data sheets]).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, TypeVar

from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy

T = TypeVar("T")

# Figure name -> (kind of quantity, SI unit in column names, label for people).
FIGURE_INFO: dict[str, tuple[str, str, str]] = {
    "regulated_current": ("current", "A", "regulated current"),
    "limiting_voltage": ("voltage", "V", "limiting voltage"),
    "dynamic_impedance": ("resistance", "ohm", "dynamic impedance"),
    "knee_impedance": ("resistance", "ohm", "knee impedance"),
    "reverse_current": ("current", "A", "reverse current"),
    "peak_current": ("current", "A", "peak current"),
    "peak_dissipation": ("power", "W", "peak dissipation"),
}
FIGURES = tuple(FIGURE_INFO)
FIGURE_KIND = {name: info[0] for name, info in FIGURE_INFO.items()}
FIGURE_UNIT = {name: info[1] for name, info in FIGURE_INFO.items()}

VERDICTS = ("pass", "fail", "guard-band", "aborted")
# Curve shapes first (in the order they are tested), then what the judge adds.
SHAPES = ("ok", "open", "short", "compliance-limited", "oscillating", "non-monotonic")
CLASSIFICATIONS = (*SHAPES, "incomplete", "aborted")
DECISIONS = ("simple", "guarded")
KNEE_BASES = ("measured", "minimum")


@dataclass(frozen=True)
class FigureLimit:
    figure: str
    min: float | None = None
    max: float | None = None


@dataclass(frozen=True)
class Shape:
    """Thresholds of the curve classification [common practice, no source]."""

    open_below_a: float = 1e-6  # no forward reading above this: open
    short_below_v: float = 1.0  # compliance reached below this voltage: short
    drop_limit: float = 0.02  # a fall by more than this fraction of the peak: non-monotonic
    scatter_limit: float = 0.01  # reading scatter above this fraction of the current: oscillating

    def __post_init__(self) -> None:
        if not (self.open_below_a > 0 and self.short_below_v > 0):
            raise ValueError("open and short thresholds must be positive")
        if not (0 < self.drop_limit < 1 and 0 < self.scatter_limit < 1):
            raise ValueError("drop and scatter limits must lie between 0 and 1")


@dataclass(frozen=True)
class FigureRange:
    """A bin condition: min <= value < max (either side may be open)."""

    figure: str
    min: float | None = None
    max: float | None = None


@dataclass(frozen=True)
class BinRule:
    """One bin: a device lands in the first bin whose conditions all hold.

    `verdicts` / `classifications` empty means any. A pass-class bin without a verdict condition
    takes only passing devices (the loader fills that in), so a careless catch-all can never
    ship a failing part."""

    number: int
    klass: str  # "pass" or "fail": the hard bin's class
    name: str = ""  # the soft bin (a grade); empty: the device's first reason
    verdicts: tuple[str, ...] = ()
    classifications: tuple[str, ...] = ()
    ranges: tuple[FigureRange, ...] = ()

    def __post_init__(self) -> None:
        if self.klass not in ("pass", "fail"):
            raise ValueError("a bin's class is pass or fail")
        if not all(v in VERDICTS for v in self.verdicts):
            raise ValueError("unknown verdict in a bin rule")
        if not all(c in CLASSIFICATIONS for c in self.classifications):
            raise ValueError("unknown classification in a bin rule")

    @property
    def catch_all(self) -> bool:
        return not (self.verdicts or self.classifications or self.ranges)


DEFAULT_BINS = (
    BinRule(1, "pass", "", ("pass",)),
    BinRule(2, "fail", "guard band", ("guard-band",)),
    BinRule(3, "fail", "", (), ("open", "short")),
    BinRule(4, "fail", "", (), ("compliance-limited", "oscillating", "non-monotonic")),
    BinRule(9, "fail", "aborted", ("aborted",)),
    BinRule(5, "fail"),
)


@dataclass(frozen=True)
class JudgeSettings:
    """Conditions, limits, decision rule and bins of the judge.

    `knee_current_a` (a fixed reference, e.g. 0.8 x the type's minimum IP) overrides
    `knee_fraction`; with `knee_of` "minimum" the reference is knee_fraction x the regulated
    current's min limit. Under the "guarded" decision rule a figure within U = k u of a limit
    is reported as in the guard band, neither passed nor failed. k is Student's t for
    `coverage_probability` at each figure's effective degrees of freedom (JCGM 100:2008 G.4),
    or the fixed `coverage_factor` when the recipe names one."""

    test_voltage_v: float = 25.0
    knee_voltage_v: float = 6.0
    knee_fraction: float = 0.8
    knee_current_a: float | None = None
    slope_window_v: float = 2.0
    limits: tuple[FigureLimit, ...] = ()
    knee_of: str = "measured"
    knee_window_v: float | None = None  # window of the knee impedance; None: slope_window_v
    reverse_voltage_v: float | None = None  # reverse_current is read here (a negative level)
    peak_voltage_v: float | None = None  # peak current and dissipation are read here
    decision: str = "simple"
    coverage_factor: float | None = None  # a fixed k; None: from coverage_probability
    coverage_probability: float = 0.95
    shape: Shape = Shape()
    bins: tuple[BinRule, ...] = DEFAULT_BINS
    accuracy: Accuracy = field(default=DEFAULT_ACCURACY)

    def __post_init__(self) -> None:
        if self.decision not in DECISIONS:
            raise ValueError(f"decision must be one of {DECISIONS}")
        if self.knee_of not in KNEE_BASES:
            raise ValueError(f"knee_of must be one of {KNEE_BASES}")
        if not (0 < self.knee_fraction < 1 and self.slope_window_v > 0):
            raise ValueError("knee_fraction must lie in (0, 1) and slope_window_v be positive")
        if self.coverage_factor is not None and not 1 <= self.coverage_factor <= 3:
            raise ValueError("coverage_factor must be 1 to 3")
        if not 0.5 <= self.coverage_probability <= 0.999:
            raise ValueError("coverage_probability must be 0.5 to 0.999")
        if self.reverse_voltage_v is not None and not self.reverse_voltage_v < 0:
            raise ValueError("reverse_voltage_v must be negative")
        if not self.bins or not self.bins[-1].catch_all:
            raise ValueError("the last bin must be a catch-all, so every device lands in a bin")

    def limit(self, figure: str) -> FigureLimit:
        for item in self.limits:
            if item.figure == figure:
                return item
        return FigureLimit(figure)

    @property
    def knee_window(self) -> float:
        return self.knee_window_v if self.knee_window_v is not None else self.slope_window_v

    def knee_reference_a(self) -> float | None:
        """A fixed knee reference current, or None when it follows the measured IP."""
        if self.knee_current_a is not None:
            return self.knee_current_a
        if self.knee_of == "minimum":
            low = self.limit("regulated_current").min
            if low is None:
                raise ValueError("knee_of 'minimum' needs a regulated_current min limit")
            return self.knee_fraction * low
        return None

    def required(self) -> tuple[str, ...]:
        """The figures this recipe asks for: missing one makes a device incomplete."""
        return self.remember("required", self._required)

    def _required(self) -> tuple[str, ...]:
        out = list(FIGURES[:4])
        if self.reverse_voltage_v is not None:
            out.append("reverse_current")
        if self.peak_voltage_v is not None:
            out += ["peak_current", "peak_dissipation"]
        return tuple(out)

    def remember(self, key: str, make: Callable[[], T]) -> T:
        """make(), worked out once for these settings: the judge's constants (a limit's bounds
        as arrays, the accuracy at the test voltage) would otherwise be worked out again for
        every device. The settings are frozen, so what is kept stays true."""
        if key not in self._kept:
            self._kept[key] = make()
        return self._kept[key]

    @cached_property
    def _kept(self) -> dict[str, Any]:
        return {}
