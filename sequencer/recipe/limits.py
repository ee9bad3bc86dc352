"""Three layers of limits and the effective limit they leave.

- the station's absolute limits (`Limits` in the station file): what fixture, wiring and SMU take;
- the recipe's own `limits:` section: tighter limits for one product, never looser ones;
- the device type's `ratings:` section: peak operating voltage and maximum dissipation (and,
  optionally, the most current a good device of the type can draw).

The effective limit of each quantity is the smallest of the layers that set it, remembered with
the layer that set it, so a refusal can say which one it hit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sequencer.model.errors import RecipeError
from sequencer.model.units import format_si

# Ceilings no station may set a limit above: (key, kind, attribute, unit, ceiling). ccbench
# drives bench SMUs for two-terminal regulators; a source beyond these is another kind of bench
# with its own rules (common practice, no source).
STATION_CEILINGS = (
    ("max_voltage", "voltage", "max_voltage_v", "V", 1000.0),
    ("max_current", "current", "max_current_a", "A", 10.0),
    ("max_power", "power", "max_power_w", "W", 1000.0),
)
TOUCH_SAFE_DEFAULT_V = 42.0  # common practice, no source (README "Safety")
# IEC 61010-1: accessible parts are hazardous live above 70 V d.c. (from memory; REFERENCES.md
# s4). A station may set its touch-safe voltage above it only with a stated reason.
HAZARDOUS_DC_V = 70.0


@dataclass(frozen=True)
class Limits:
    """Absolute limits of a station: what the fixture, wiring and SMU may ever carry.

    Every value is finite and positive and within the ceilings of sequencer.recipe.limits; the
    touch-safe voltage is at most `max_voltage` and, unless `touch_safe_reason` says why, at
    most the d.c. level IEC 61010-1 calls hazardous live. The loader refuses a file that breaks
    a rule with file:line; this check is the backstop for limits built in code.
    """

    max_voltage_v: float
    max_current_a: float
    max_power_w: float
    # Above this a level is hazardous: interlocked fixture, closed lid and an acknowledgement.
    # 42 V is common practice, no source. Beside it, IEC 61010-1 calls accessible parts
    # hazardous live above 33 V rms, 46.7 V peak or 70 V d.c. (from memory; verify against the
    # standard, REFERENCES.md s4).
    touch_safe_v: float = 42.0
    touch_safe_reason: str = ""  # why this station's touch-safe voltage is above 70 V d.c.

    def __post_init__(self) -> None:
        problem = station_limits_problem(self)
        if problem:
            raise ValueError(problem)


@dataclass(frozen=True)
class RecipeLimits:
    """A recipe's `limits:` section; None where the recipe leaves the station's limit alone."""

    max_voltage_v: float | None = None
    max_current_a: float | None = None
    max_power_w: float | None = None


@dataclass(frozen=True)
class Ratings:
    """A device type's `ratings:` section (absolute maximum ratings of its data sheet).

    `worst_case_current_a` is the most a good device of the type can draw at any level; with it,
    the dissipation a point can cause is V x min(compliance, worst case) rather than V x
    compliance. A device drawing more trips the run-time guard on its reading.
    """

    peak_operating_voltage_v: float | None = None
    max_dissipation_w: float | None = None
    worst_case_current_a: float | None = None


@dataclass(frozen=True)
class Bound:
    """One effective limit and the layer that set it ("station", "recipe" or "ratings")."""

    value: float
    source: str

    def describe(self, unit: str) -> str:
        return f"{_owner(self.source)} {format_si(self.value, unit)}"


def _owner(source: str) -> str:
    return {"station": "the station's maximum", "recipe": "the recipe's maximum"}.get(
        source, f"the device's rated {source}"
    )


@dataclass(frozen=True)
class EffectiveLimits:
    """The smallest of the three layers for each quantity, as the pre-flight and guard use it.

    `power` limits what the SMU can deliver (|V| x compliance); `dissipation`, when the ratings
    give one, limits what the device itself can take.
    """

    voltage: Bound
    current: Bound
    power: Bound
    dissipation: Bound | None
    worst_case_current_a: float | None
    touch_safe_v: float

    def __post_init__(self) -> None:
        # The safety layer's own check: a NaN or infinite limit would compare false (or true)
        # with every level, whichever loader or test built it.
        values = [self.voltage.value, self.current.value, self.power.value, self.touch_safe_v]
        if self.dissipation is not None:
            values.append(self.dissipation.value)
        if self.worst_case_current_a is not None:
            values.append(self.worst_case_current_a)
        for value in values:
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"every limit must be finite and positive (got {value!r})")

    def device_power_w(self, volts: float, compliance_a: float) -> float:
        """The most a device can dissipate at `volts` with this compliance."""
        current = compliance_a
        if self.worst_case_current_a is not None:
            current = min(current, self.worst_case_current_a)
        return abs(volts) * current


def effective_limits(
    station: Limits, recipe: RecipeLimits | None = None, ratings: Ratings | None = None
) -> EffectiveLimits:
    recipe = recipe or RecipeLimits()
    ratings = ratings or Ratings()
    voltage = _smallest(
        ("station", station.max_voltage_v),
        ("recipe", recipe.max_voltage_v),
        ("peak operating voltage", ratings.peak_operating_voltage_v),
    )
    current = _smallest(("station", station.max_current_a), ("recipe", recipe.max_current_a))
    power = _smallest(("station", station.max_power_w), ("recipe", recipe.max_power_w))
    dissipation = None
    if ratings.max_dissipation_w is not None:
        dissipation = Bound(ratings.max_dissipation_w, "dissipation")
    return EffectiveLimits(
        voltage, current, power, dissipation, ratings.worst_case_current_a, station.touch_safe_v
    )


def _smallest(*layers: tuple[str, float | None]) -> Bound:
    best: Bound | None = None
    for source, value in layers:
        if value is not None and (best is None or value < best.value):
            best = Bound(value, source)
    assert best is not None  # the station layer is always set
    return best


def as_effective(limits: Limits | EffectiveLimits) -> EffectiveLimits:
    return limits if isinstance(limits, EffectiveLimits) else effective_limits(limits)


# --- the station's limits ---------------------------------------------------------------------


def station_limits_problem(limits: Limits) -> str | None:
    """What is wrong with a station's limits however they were built, or None."""
    for _, _, attr, unit, ceiling in STATION_CEILINGS:
        value = getattr(limits, attr)
        if not (math.isfinite(value) and 0 < value <= ceiling):
            return f"{attr} must be above 0 and at most {ceiling:g} {unit} (got {value!r})"
    touch = limits.touch_safe_v
    if not (math.isfinite(touch) and touch > 0):
        return f"touch_safe_v must be finite and positive (got {touch!r})"
    if touch > HAZARDOUS_DC_V and not limits.touch_safe_reason.strip():
        return f"touch_safe_v above {HAZARDOUS_DC_V:g} V needs a touch_safe_reason (got {touch!r})"
    return None


# --- refusals ---------------------------------------------------------------------------------


class LimitRaised(RecipeError):
    """A recipe tries to raise a station limit: located like any recipe mistake, but a safety
    refusal (exit code 3)."""

    exit_code = 3
