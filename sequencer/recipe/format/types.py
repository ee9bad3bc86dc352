"""The building blocks of the formats: a section that refuses unknown keys with a hint, and the
typed values a setting can hold (quantities with units, text, whole numbers, choices).

A value that breaks a rule raises `problem(...)`: a pydantic error whose message is the one line
the loader shows after `file:line: field`. `at` names a key below the one validated, so that a
rule checked on a whole section (a maximum above a minimum) still points at its own line.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from typing import Annotated, Any, ClassVar, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainValidator,
    Strict,
    WithJsonSchema,
    model_validator,
)
from pydantic_core import PydanticCustomError

from sequencer.recipe.fields import MAX_TEXT, close_to, show
from sequencer.recipe.units import (
    KINDS,
    PLAIN_NUMBER,
    UnitProblem,
    parse_quantity,
    parse_rate_k_per_s,
    parse_temperature_c,
    parse_temperature_step_k,
    plain_number,
)

PROBLEM = "ccbench"  # the error type of every message written here (format.errors reads it)


def problem(text: str, at: str | int | None = None) -> PydanticCustomError:
    ctx: dict[str, Any] = {"problem": text}
    if at is not None:
        ctx["at"] = at
    return PydanticCustomError(PROBLEM, "{problem}", ctx)


class Section(BaseModel):
    """One mapping of settings. Unknown keys are refused before anything else is checked, so a
    misspelt required key is named as misspelt ("did you mean 'compliance'?"), not as missing."""

    model_config = ConfigDict(extra="forbid", frozen=True, hide_input_in_errors=False)
    renamed: ClassVar[dict[str, str]] = {}  # a key an earlier ccbench knew -> its name now

    @model_validator(mode="before")
    @classmethod
    def _known_keys(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            raise problem(f"must be a mapping of settings (got {show(data)})")
        known = cls.file_keys()
        for key in data:
            if key in cls.renamed:
                new = cls.renamed[key]
                raise problem(f"is now called '{new}'; write '{new}:' instead", at=str(key))
            if key not in known:
                near = close_to(str(key), known)
                hint = f"did you mean '{near[0]}'?" if near else f"known here: {', '.join(known)}"
                raise problem(f"is not a known setting; {hint}", at=str(key))
        return data

    @classmethod
    def file_keys(cls) -> list[str]:
        """The keys a file writes (a field's alias where Python needs another name)."""
        return [f.alias or name for name, f in cls.model_fields.items()]


def setting(meaning: str, default: Any = ..., **extra: Any) -> Any:
    """A field with its one-line meaning; a default written as in a file ('0 s') is parsed."""
    return Field(default, description=meaning, validate_default=default is not ..., **extra)


def rule(test: Callable[[Any], bool], message: str) -> AfterValidator:
    """A check of the parsed value; `message` may quote it as {v} (a float shown with :g)."""

    def check(value: Any) -> Any:
        if value is not None and not test(value):
            shown = f"{value:g}" if isinstance(value, float) else value
            raise problem(message.format(v=shown, raw=value))
        return value

    return AfterValidator(check)


def bounds(low: float | None = None, high: float | None = None, **more: float) -> Any:
    """What an editor checks beside the loader: minimum and maximum in the JSON Schema."""
    extra = {"minimum": low, "maximum": high, **more}
    return Field(json_schema_extra={k: v for k, v in extra.items() if v is not None})


# --- quantities ---------------------------------------------------------------------------------

_QUANTITY_PATTERN = rf"^\s*{PLAIN_NUMBER}\s*\S.*$"
ARTICLE = {"voltage": "a voltage", "current": "a current", "power": "a power", "time": "a time",
           "resistance": "a resistance", "frequency": "a frequency"}  # fmt: skip


def _parsed(parse: Callable[[Any], float]) -> BeforeValidator:
    def check(value: Any) -> float:
        try:
            return parse(value)
        except UnitProblem as exc:
            raise problem(str(exc)) from None

    return BeforeValidator(check)


def _quantity(kind: str) -> Any:
    example = KINDS[kind][2]
    words = f"{ARTICLE[kind]} with its unit, e.g. '{example}'"
    schema = {"type": "string", "pattern": _QUANTITY_PATTERN, "x-unit": words}
    return Annotated[
        float, _parsed(lambda v: parse_quantity(v, kind)), WithJsonSchema(schema, mode="validation")
    ]


Voltage = _quantity("voltage")
Current = _quantity("current")
Power = _quantity("power")
Time = _quantity("time")
Resistance = _quantity("resistance")
Frequency = _quantity("frequency")
QUANTITY = {"voltage": Voltage, "current": Current, "power": Power, "time": Time,
            "resistance": Resistance, "frequency": Frequency}  # fmt: skip


def _unit_string(words: str, parse: Callable[[Any], float]) -> Any:
    schema = {"type": "string", "pattern": _QUANTITY_PATTERN, "x-unit": words}
    return Annotated[float, _parsed(parse), WithJsonSchema(schema, mode="validation")]


Temperature = _unit_string("a temperature in degC or K, e.g. '85 degC'", parse_temperature_c)
TemperatureStep = _unit_string("a temperature difference in K, e.g. '0.5 K'",
                               parse_temperature_step_k)  # fmt: skip
Rate = _unit_string("a rate in K/s, K/min or K/h, e.g. '5 K/min'", parse_rate_k_per_s)

_PCT_PER_K = re.compile(rf"\s*({PLAIN_NUMBER})\s*%/K\s*")


def _pct_per_k(value: Any) -> float:
    match = _PCT_PER_K.fullmatch(value) if isinstance(value, str) else None
    if match is None:
        raise UnitProblem(f"must be in %/K, e.g. '0.05 %/K' (got {value!r})")
    return plain_number(match.group(1))


PercentPerKelvin = _unit_string("a temperature coefficient in %/K, e.g. '0.05 %/K'", _pct_per_k)


def _fraction(value: Any) -> float:
    """'0.05 %' or '50 ppm' as a fraction (0.0005); a bare number is refused (0.05 of what?)."""
    text = str(value).strip() if isinstance(value, str) else ""
    for suffix, factor in (("%", 1e-2), ("ppm", 1e-6)):
        if text.endswith(suffix):
            try:
                number = plain_number(text.removesuffix(suffix)) * factor
            except UnitProblem as exc:
                raise UnitProblem(f"{exc}; e.g. '0.05 %'") from None
            if not 0 <= number < 0.1:
                raise UnitProblem(f"must be 0 to 10 % (got {value!r})")
            return number
    raise UnitProblem(f"must be a fraction in % or ppm, e.g. '0.05 %' (got {value!r})")


Fraction = _unit_string("a fraction in % or ppm, e.g. '0.05 %'", _fraction)


# --- plain values -------------------------------------------------------------------------------


def _text(value: Any) -> str:
    """Text as written; a bare number (a lot written 2611) is text too, a boolean is not."""
    if not isinstance(value, str | int | float) or isinstance(value, bool):
        raise problem(f"must be text (got {show(value)})")
    if len(str(value)) > MAX_TEXT:
        raise problem(f"is longer than {MAX_TEXT} characters")
    return str(value)


Text = Annotated[
    str,
    BeforeValidator(_text),
    WithJsonSchema({"type": ["string", "number"], "maxLength": MAX_TEXT}, mode="validation"),
]


def _number(value: Any) -> Any:
    """A plain number kept as written (an int stays an int: the simulator is given it as is)."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise problem(f"must be a plain number (got {show(value)})")
    if not math.isfinite(value):
        raise problem(f"must be a finite number (got {value!r})")
    return value


Whole = Annotated[int, Strict()]  # a whole number as written: 2.0 or true is refused
Number = Annotated[float, PlainValidator(_number), WithJsonSchema({"type": "number"})]
Flag = Annotated[bool, Strict()]  # true or false only


def choice(options: tuple[str, ...], *, listed: str = "one of") -> Any:
    """One of `options`; refused as 'must be one of a, b' or (listed='or') "must be 'a' or 'b'"."""
    if listed == "or":
        words = "must be " + " or ".join(repr(o) for o in options)
    else:
        words = f"must be one of {', '.join(options)}"

    def check(value: Any) -> Any:
        if value not in options:
            raise problem(f"{words} (got {value!r})")
        return value

    return Annotated[Literal[options], BeforeValidator(check)]  # type: ignore[valid-type]
