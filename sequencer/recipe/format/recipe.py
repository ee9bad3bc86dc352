"""The recipe file's format: what to measure (steps), how to judge it, and the run's own rules.

Every key with its type, unit, default and meaning; the rules of one value or one section are
here too. The loader (sequencer.recipe.load, recipebuild) turns the model into recipe.load.Recipe
and checks what spans sections or files (limits against the station, figures steps against the
judge, step names, bins together).
"""

from __future__ import annotations

import re
from typing import Annotated, Any, ClassVar, Union

from pydantic import (
    AfterValidator,
    BeforeValidator,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    WithJsonSchema,
    model_validator,
)

from sequencer.recipe.format.judge import Judge
from sequencer.recipe.format.types import (
    Current,
    Flag,
    Number,
    PercentPerKelvin,
    Power,
    Section,
    Temperature,
    TemperatureStep,
    Text,
    Time,
    Voltage,
    Whole,
    bounds,
    choice,
    problem,
    rule,
    setting,
)
from sequencer.recipe.serials import CASES as SERIAL_CASES

ON_COMPLIANCE = ("flag", "trip")
ON_TRIP = ("stop", "skip")
ACKNOWLEDGED = "acknowledged"
MAX_POINTS = 100_000
MAX_WINDOW_READINGS = 50
MAX_SEARCH_POINTS = 30
MAX_SET_POINTS = 100

Positive = rule(lambda v: v > 0, "must be positive (got {v})")
PositiveCurrent = Annotated[Current, Positive]
PositiveVoltage = Annotated[Voltage, Positive]
Settle = Annotated[Time, rule(lambda v: 0 <= v <= 10, "must be 0 to 10 s (got {v} s)")]
OnCompliance = choice(ON_COMPLIANCE, listed="or")


def count(least: int, most: int) -> Any:
    check = rule(lambda v: least <= v <= most, f"must be {least} to {most} (got {{v}})")
    return Annotated[Whole, check, bounds(least, most)]


# --- steps --------------------------------------------------------------------------------------

ON_COMPLIANCE_MEANING = (
    "flag: a clamped point is kept, marked and left out of the figures; trip: the step must "
    "not clamp, a hit trips the guard"
)


class Sweep(Section):
    """`sweep:` — the I-V curve from start to stop, point by point."""

    name: Text | None = setting("the step's name in records (default sweep1, sweep2, ...)", None)
    start: Voltage = setting("the first level")
    stop: Voltage = setting("the last level (must differ from start)")
    points: count(2, MAX_POINTS) | None = setting("how many levels, start and stop included "
                                                  "(or give step)", None)  # fmt: skip
    step: PositiveVoltage | None = setting("the spacing of levels (or give points); must divide "
                                           "the span evenly", None)  # fmt: skip
    compliance: PositiveCurrent = setting("the current limit of every level")
    settle: Settle = setting("the wait after each level change, before the reading", "0 s")
    on_compliance: OnCompliance = setting(ON_COMPLIANCE_MEANING, "flag")

    @model_validator(mode="after")
    def _levels(self) -> Sweep:
        if self.stop == self.start:
            raise problem(f"must differ from start (both {self.start} V)", at="stop")
        if (self.points is None) == (self.step is None):
            raise problem("or 'step' must be given, not both and not neither", at="points")
        if self.step is not None:
            step, span = self.step, abs(self.stop - self.start)
            points = self.level_count
            if points > MAX_POINTS:
                raise problem(f"gives {points} points; at most {MAX_POINTS} (got {step:g} V)",
                              at="step")  # fmt: skip
            if abs((points - 1) * step - span) >= 1e-9 * max(span, 1):
                raise problem(f"must divide the span {span:g} V evenly (got {step:g} V)",
                              at="step")  # fmt: skip
        return self

    @property
    def level_count(self) -> int:
        if self.points is not None:
            return self.points
        assert self.step is not None
        return round(abs(self.stop - self.start) / self.step) + 1


class Spot(Section):
    """`spot:` — repeated readings at one level."""

    name: Text | None = setting("the step's name in records (default spot1, spot2, ...)", None)
    voltage: Voltage = setting("the level")
    compliance: PositiveCurrent = setting("the current limit")
    repeats: count(1, 10_000) = setting("how many readings", 1)
    settle: Settle = setting("the wait after the level change, before the readings", "0 s")
    on_compliance: OnCompliance = setting(ON_COMPLIANCE_MEANING, "flag")


class Figures(Section):
    """`figures:` — a production step that measures only the points the judge needs."""

    name: Text | None = setting("the step's name in records (default figures1, ...)", None)
    compliance: PositiveCurrent = setting("the current limit of every level")
    settle: Settle = setting("the wait after each level change", "0 s")
    test_window_readings: count(3, MAX_WINDOW_READINGS) = setting(
        "readings across the slope window around the test voltage", 3
    )
    knee_window_readings: count(3, MAX_WINDOW_READINGS) = setting(
        "readings across the knee window around the knee voltage", 3
    )
    repeats: count(0, 10_000) = setting(
        "spot readings at the test voltage (0: the regulated current from the window's line)", 0
    )
    knee_resolution: PositiveVoltage = setting(
        "the limiting-voltage search stops when its bracket is this narrow", "0.5 V"
    )
    typical_limiting_voltage: PositiveVoltage | None = setting(
        "where the search starts (default: mid-range)", None
    )
    search_from: Annotated[Voltage, rule(lambda v: v >= 0, "must be 0 V or more (got {v} V)")] = (
        setting("the lowest level the search reads", "0 V")
    )
    max_search_points: count(2, MAX_SEARCH_POINTS) = setting(
        "the most levels the search may read", 8
    )
    on_compliance: OnCompliance = setting(ON_COMPLIANCE_MEANING, "flag")


STEP_KINDS = ("sweep", "spot", "figures")


def _one_step(value: Any) -> Any:
    if not isinstance(value, dict) or len(value) != 1:
        raise problem("must be one 'sweep:', 'spot:' or 'figures:' mapping")
    (kind,) = value
    if kind not in STEP_KINDS:
        raise problem("is not a step kind (expected 'sweep', 'spot' or 'figures')", at=str(kind))
    return value


class Step(Section):
    """One step: a mapping of one key, its kind. (One model with three optional keys rather
    than a union of three, so an editor's message points inside the step, at the wrong key.)"""

    model_config = ConfigDict(json_schema_extra={"minProperties": 1, "maxProperties": 1})

    sweep: Sweep = Field(None, description="a sweep step: the I-V curve, level by level")
    spot: Spot = Field(None, description="a spot step: repeated readings at one level")
    figures: Figures = Field(None, description="a production step: only what the judge needs")

    @model_validator(mode="before")
    @classmethod
    def _one_kind(cls, data: Any) -> Any:
        return _one_step(data)

    @property
    def kind(self) -> str:
        return next(k for k in STEP_KINDS if getattr(self, k) is not None)


def _some_steps(value: Any) -> Any:
    if not isinstance(value, list) or not value:
        raise problem("must be a list of one or more steps (sweep, spot, figures)")
    return value


# --- the run's own rules ------------------------------------------------------------------------


def _positive(unit: str) -> Any:
    return rule(lambda v: v > 0, f"must be positive (got {{v}} {unit})")


class RecipeLimits(Section):
    """`limits:` — tighter limits for this product; never above the station's."""

    max_voltage: Annotated[Voltage, _positive("V")] | None = setting(
        "the highest level this recipe may set", None
    )
    max_current: Annotated[Current, _positive("A")] | None = setting(
        "the highest compliance this recipe may set", None
    )
    max_power: Annotated[Power, _positive("W")] | None = setting(
        "the most power, |V| x compliance, this recipe may deliver", None
    )


class Ratings(Section):
    """`ratings:` — the device type's absolute maximum ratings (its data sheet)."""

    peak_operating_voltage: Annotated[Voltage, _positive("V")] | None = setting(
        "no level above this", None
    )
    max_dissipation: Annotated[Power, _positive("W")] | None = setting(
        "the most a device may dissipate", None
    )
    worst_case_current: Annotated[Current, _positive("A")] | None = setting(
        "the most a good device of the type can draw (then dissipation is V x this)", None
    )


def _acknowledged(value: Any) -> Any:
    if value is not None and value != ACKNOWLEDGED:
        raise problem(f"must be '{ACKNOWLEDGED}' or left out (got {value!r})")
    return value


Acknowledgement = Annotated[str, BeforeValidator(_acknowledged),
                            WithJsonSchema({"const": ACKNOWLEDGED})]  # fmt: skip


class Repeat(Section):
    """`repeat:` — rounds over the tray on a schedule."""

    # `passes` until schema 8: a repetition number must never read as a verdict
    renamed: ClassVar[dict[str, str]] = {"passes": "rounds"}

    every: Time = setting("from the start of one round to the start of the next")
    for_: Time | None = setting(
        "how long from the run's first start (default: until stopped or rounds)", None,
        alias="for",
    )  # fmt: skip
    rounds: Whole | None = setting("the most rounds (default: until stopped or for)", None)

    @model_validator(mode="after")
    def _sensible(self) -> Repeat:
        if self.every < 0:
            raise problem(f"every must be 0 s or more (got {self.every} s)")
        if self.for_ is not None and not self.for_ > 0:
            raise problem(f"for must be positive (got {self.for_} s)")
        if self.rounds is not None and self.rounds < 1:
            raise problem(f"rounds must be 1 or more (got {self.rounds})")
        return self


def _regular_expression(value: str) -> str:
    try:
        re.compile(value)
    except re.error as exc:
        raise problem(f"is not a regular expression ({exc})") from None
    return value


class Serials(Section):
    """`serials:` — how a scanned or typed serial is written before it names a part."""

    case: choice(SERIAL_CASES) = setting(  # type: ignore[valid-type]
        "as-scanned (compared exactly as read), upper or lower", "as-scanned"
    )
    drop: Annotated[Text, rule(lambda v: len(v) <= 20, "is longer than 20 characters")] = setting(
        "characters taken out of every serial wherever they are", ""
    )


class PartByPart(Section):
    """`part_by_part:` — testing scanned parts one at a time, with retests."""

    retests: count(0, 100) = setting("tests of a part beyond its first (aborted do not count)", 1)
    retest_passed: Flag = setting("false: a part that passed is refused as a duplicate", False)
    result: choice(("last", "best", "first")) = setting(  # type: ignore[valid-type]
        "which attempt is the part's result", "last"
    )
    serial_pattern: Annotated[Text, AfterValidator(_regular_expression)] = setting(
        "a regular expression every scanned serial must match (empty: any)", ""
    )
    serials: Serials = setting("how serials are written before they name a part", {})


Soak = Annotated[Time, rule(lambda v: v > 0, "must be positive")]


class SetPoint(Section):
    """One set point with its own soak rule."""

    set: Temperature = setting("the chamber's set point")
    band: Annotated[TemperatureStep, rule(lambda v: v > 0, "must be positive, e.g. '0.5 K'")] = (
        setting("stable once the reading stays within this of the set point", "0.5 K")
    )
    for_: Soak = setting("... for this long", "5 min", alias="for")
    timeout: Soak = setting("a soak not settled by then ends the run", "60 min")

    @model_validator(mode="after")
    def _longer(self) -> SetPoint:
        if not self.timeout > self.for_:
            raise problem(f"must be longer than the soak ('for': {self.for_:g} s)", at="timeout")
        return self


Point = Annotated[
    Union[Annotated[Temperature, Tag("~bare")], Annotated[SetPoint, Tag("~mapping")]],  # noqa: UP007
    Discriminator(lambda v: "~mapping" if isinstance(v, dict) else "~bare"),
]


def _some_points(value: Any) -> Any:
    if not isinstance(value, list) or not 1 <= len(value) <= MAX_SET_POINTS:
        raise problem(
            f"must be a list of 1 to {MAX_SET_POINTS} set points, e.g. [25 degC, 85 degC]"
        )
    return value


class TempCo(Section):
    """`tempco:` — limits on each device's temperature coefficient of the regulated current."""

    min: PercentPerKelvin | None = setting("the lowest coefficient allowed", None)
    max: PercentPerKelvin | None = setting("the highest coefficient allowed", None)

    @model_validator(mode="after")
    def _ordered(self) -> TempCo:
        if self.min is not None and self.max is not None and not self.min < self.max:
            raise problem(f"must be above min ({self.min:g} %/K)", at="max")
        return self


# --- the recipe file ----------------------------------------------------------------------------


class RecipeFile(Section):
    """A recipe file: the product and lot, the station it runs on, its steps and judge."""

    product: Text = setting("the device type under test, as records show it")
    lot: Text = setting("the lot under test (the command line's --lot replaces it)")
    operator: Text = setting("who runs it, for the records", "")
    station: Text = setting("the station file, relative to the recipe")
    nplc: Annotated[
        Number, rule(lambda v: 0.01 <= v <= 10, "must be 0.01 to 10 power-line cycles (got {v})"),
        bounds(0.01, 10),
    ] = setting("the aperture of every reading, in power-line cycles", 1.0)  # fmt: skip
    steps: Annotated[list[Step], BeforeValidator(_some_steps)] = setting(
        "what to measure, in order: sweep, spot or figures steps"
    )
    judge: Judge = setting("how the readings are judged", {})
    limits: RecipeLimits | None = setting("tighter limits than the station's", None)
    ratings: Ratings | None = setting("the device type's absolute maximum ratings", None)
    on_trip: choice(ON_TRIP, listed="or") = setting(  # type: ignore[valid-type]
        "after a device trips the guard: stop the run, or skip to the next device", "stop"
    )
    hazardous_voltage: Acknowledgement | None = setting(
        "write 'acknowledged' to allow levels above the station's touch-safe voltage", None
    )
    repeat: Repeat | None = setting("rounds over the tray on a schedule (default: one round)", None)
    part_by_part: PartByPart | None = setting("the retest policy of --part-by-part", None)
    lists: Flag = setting("run steps as instrument-side lists where safe", False)
    temperatures: Annotated[list[Point], BeforeValidator(_some_points)] | None = setting(
        "set points to run the steps at, each a temperature or {set, band, for, timeout}", None
    )
    tempco: TempCo | None = setting("limits on the temperature coefficient", None)
