"""The recipe's `judge:` section: the figures, their limits, the decision rule and the bins.

Part of the recipe format (format.recipe); the bins together (one class a bin number, a
catch-all last) are checked across bins in recipebuild.
"""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import BeforeValidator, WithJsonSchema, create_model, model_validator

from sequencer.model.judgesettings import (
    CLASSIFICATIONS,
    DECISIONS,
    FIGURE_KIND,
    FIGURES,
    KNEE_BASES,
    VERDICTS,
)
from sequencer.recipe.format.types import (
    QUANTITY,
    Current,
    Number,
    Section,
    Text,
    Voltage,
    Whole,
    bounds,
    choice,
    problem,
    rule,
    setting,
)

Positive = rule(lambda v: v > 0, "must be positive (got {v})")
PositiveCurrent = Annotated[Current, Positive]
PositiveVoltage = Annotated[Voltage, Positive]


def fraction_between_0_and_1() -> Any:
    check = rule(lambda v: 0 < v < 1, "must lie between 0 and 1 (got {v})")
    return Annotated[Number, check, bounds(exclusiveMinimum=0, exclusiveMaximum=1)]


# --- judge --------------------------------------------------------------------------------------


class _Span(Section):
    """A min and a max of one figure, either left out."""

    @model_validator(mode="after")
    def _ordered(self) -> _Span:
        low, high = self.min, self.max  # type: ignore[attr-defined]
        if low is None and high is None:
            raise problem("or 'max' must be given", at="min")
        if low is not None and high is not None and not low < high:
            raise problem(f"must exceed min ({low})", at="max")
        return self


def _span_model(kind: str) -> type[_Span]:
    quantity = QUANTITY[kind]
    return create_model(  # type: ignore[call-overload, no-any-return]
        f"{kind.capitalize()}Span",
        __base__=_Span,
        __doc__=f"A range of a {kind}: min, max or both.",
        min=(quantity | None, setting(f"the lowest {kind} allowed", None)),
        max=(quantity | None, setting(f"the highest {kind} allowed", None)),
    )


SPAN = {kind: _span_model(kind) for kind in sorted(set(FIGURE_KIND.values()))}
FIGURE_WORDS = {
    "regulated_current": "the regulated current at the test voltage",
    "limiting_voltage": "the voltage where the current reaches the knee reference",
    "dynamic_impedance": "the slope impedance around the test voltage",
    "knee_impedance": "the slope impedance around the knee voltage",
    "reverse_current": "the current at the reverse voltage",
    "peak_current": "the current at the peak voltage",
    "peak_dissipation": "the dissipation at the peak voltage",
}
_FIGURE_FIELDS: dict[str, Any] = {
    figure: (SPAN[FIGURE_KIND[figure]] | None, setting(f"limits of {FIGURE_WORDS[figure]}", None))
    for figure in FIGURES
}
FigureLimits = create_model(
    "FigureLimits",
    __base__=Section,
    __doc__="`judge.limits:` — the figures' pass limits (min <= value <= max).",
    **_FIGURE_FIELDS,
)


def one_or_list(options: tuple[str, ...]) -> Any:
    words = f"must be one of {', '.join(options)}"

    def check(value: Any) -> tuple[str, ...]:
        items = value if isinstance(value, list | tuple) else [value]
        for item in items:
            if item not in options:
                raise problem(f"{words} (got {item!r})")
        return tuple(items)

    enum = {"enum": list(options)}
    schema = {"anyOf": [enum, {"type": "array", "items": enum}]}
    return Annotated[tuple[str, ...], BeforeValidator(check), WithJsonSchema(schema)]


_BIN_FIELDS: dict[str, Any] = {
    "bin": (
        Annotated[Whole, rule(lambda v: 0 <= v <= 32767, "must be 0 to 32767 (got {v})"),
                  bounds(0, 32767)],
        setting("the hard bin number (STDF)"),
    ),
    # `class` is a Python word: the field is klass, written `class` in a file.
    "klass": (choice(("pass", "fail")), setting("pass or fail: the bin's class", "fail",
                                                alias="class")),
    "name": (Text, setting("the soft bin's name (without one: the device's first reason)", "")),
    "verdict": (one_or_list(VERDICTS), setting("the verdicts this bin takes (one or a list)", ())),
    "classification": (
        one_or_list(CLASSIFICATIONS),
        setting("the curve classifications this bin takes (one or a list)", ()),
    ),
}  # fmt: skip
_BIN_FIELDS.update(
    {
        figure: (
            SPAN[FIGURE_KIND[figure]] | None,
            setting(f"the range of {FIGURE_WORDS[figure]} (min <= value < max)", None),
        )
        for figure in FIGURES
    }
)


class _BinRules(Section):
    @model_validator(mode="after")
    def _pass_bin(self) -> _BinRules:
        shipped = set(self.verdict) - {"pass", "guard-band"}  # type: ignore[attr-defined]
        if self.klass == "pass" and shipped:  # type: ignore[attr-defined]
            raise problem("of a pass-class bin may only be pass or guard-band", at="verdict")
        return self


Bin = create_model(
    "Bin",
    __base__=_BinRules,
    __doc__="One bin: the first whose conditions all hold takes the device.",
    **_BIN_FIELDS,
)


def _some_bins(value: Any) -> Any:
    if not isinstance(value, list) or not value:
        raise problem("must be a list of one or more bins")
    return value


class Shape(Section):
    """`judge.shape:` — the thresholds that classify a curve's shape."""

    open_below: PositiveCurrent = setting("no forward reading above this: open", "1 uA")
    short_below: PositiveVoltage = setting("compliance reached below this voltage: short", "1 V")
    drop_limit: fraction_between_0_and_1() = setting(
        "the current falls by more than this fraction of its peak: non-monotonic", 0.02
    )
    scatter_limit: fraction_between_0_and_1() = setting(
        "reading scatter above this fraction of the current: oscillating", 0.01
    )


class Judge(Section):
    """`judge:` — the figures, their limits, the decision rule and the bins."""

    test_voltage: PositiveVoltage = setting("where the regulated current is read (VT)", "25 V")
    knee_voltage: PositiveVoltage = setting("where the knee impedance is read (VK)", "6 V")
    knee_fraction: fraction_between_0_and_1() = setting(
        "the limiting voltage is where the current reaches this fraction of knee_of", 0.8
    )
    knee_of: choice(KNEE_BASES) = setting(  # type: ignore[valid-type]
        "measured: of the measured regulated current; minimum: of its min limit", "measured"
    )
    knee_current: PositiveCurrent | None = setting(
        "a fixed reference current for the limiting voltage (replaces knee_fraction and knee_of)",
        None,
    )
    slope_window: PositiveVoltage = setting(
        "the span of the least-squares slope for the dynamic impedance", "2 V"
    )
    knee_window: Annotated[Voltage, rule(lambda v: v > 0, "must be positive")] | None = setting(
        "the span of the slope around the knee voltage (default: slope_window)", None
    )
    reverse_voltage: (
        Annotated[Voltage, rule(lambda v: v < 0, "must be negative (got {v})")] | None
    ) = setting("a negative level for the reverse current (needs a step there)", None)
    peak_voltage: PositiveVoltage | None = setting(
        "the peak operating voltage: current and dissipation there", None
    )
    decision: choice(DECISIONS) = setting(  # type: ignore[valid-type]
        "simple: inside the limits passes; guarded: limits narrowed by the expanded uncertainty "
        "(ILAC-G8)",
        "simple",
    )
    coverage_factor: (
        Annotated[Number, rule(lambda v: 1 <= v <= 3, "must be 1 to 3 (got {v})"), bounds(1, 3)]
        | None
    ) = setting(
        "a fixed k for U = k x u (default: Student's t at each figure's degrees of freedom)", None
    )
    coverage_probability: Annotated[
        Number, rule(lambda v: 0.5 <= v <= 0.999, "must be 0.5 to 0.999 (got {v})"),
        bounds(0.5, 0.999),
    ] = setting("the coverage probability the factor k gives", 0.95)  # fmt: skip
    shape: Shape = setting("classification thresholds", {})
    limits: FigureLimits = setting("the figures' pass limits", {})  # type: ignore[valid-type]
    bins: Annotated[list[Bin], BeforeValidator(_some_bins)] | None = setting(  # type: ignore[valid-type]
        "the bins, first match wins; the last must be a catch-all of class fail (default: "
        "pass, guard band, open/short, other failures, aborted)",
        None,
    )

    @model_validator(mode="after")
    def _one_or_other(self) -> Judge:
        written = self.model_fields_set
        if self.knee_current is not None and written & {"knee_fraction", "knee_of"}:
            raise problem("replaces knee_fraction and knee_of; give one or other",
                          at="knee_current")  # fmt: skip
        if self.coverage_factor is not None and "coverage_probability" in written:
            raise problem("a fixed k replaces coverage_probability; give one or other",
                          at="coverage_factor")  # fmt: skip
        current = self.limits.regulated_current  # type: ignore[attr-defined]
        if self.knee_of == "minimum" and (current is None or current.min is None):
            raise problem("'minimum' needs limits.regulated_current.min", at="knee_of")
        return self
