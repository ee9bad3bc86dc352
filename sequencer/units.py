"""Units are parsed once, at the edge, with one pint registry; inside, everything is SI floats."""

from __future__ import annotations

from functools import lru_cache

import pint

# Dimension name -> (pint dimensionality, SI unit we convert to, example shown in messages).
KINDS: dict[str, tuple[str, str, str]] = {
    "voltage": ("[length] ** 2 * [mass] / [current] / [time] ** 3", "V", "25 V"),
    "current": ("[current]", "A", "2 mA"),
    "power": ("[length] ** 2 * [mass] / [time] ** 3", "W", "250 mW"),
    "time": ("[time]", "s", "20 ms"),
    "resistance": ("[length] ** 2 * [mass] / [current] ** 2 / [time] ** 3", "ohm", "100 kohm"),
    "frequency": ("1 / [time]", "Hz", "50 Hz"),
}


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    return pint.UnitRegistry()


class UnitProblem(ValueError):
    """Raised with a short description; the recipe loader adds file, line and field."""


def parse_quantity(value: object, kind: str) -> float:
    """Parse '25 V', '2 mA', '0.5 Mohm' into an SI float of the given kind.

    Bare numbers are refused: a number without a unit is the commonest recipe mistake and the
    consequences (25 A instead of 25 mA) are not ones to guess at.
    """
    dims, si_unit, example = KINDS[kind]
    if isinstance(value, bool) or value is None:
        raise UnitProblem(f"must be a {kind} with a unit, e.g. '{example}' (got {value!r})")
    if isinstance(value, int | float):
        raise UnitProblem(f"needs a unit, e.g. '{example}' (got {value!r})")
    text = str(value).strip().replace("Ω", "ohm").replace("µ", "u")
    if not text[:1].isdigit() and text[:1] not in "+-.":
        raise UnitProblem(f"must start with a number, e.g. '{example}' (got {value!r})")
    try:
        quantity = registry().Quantity(text)
    except Exception as exc:  # pint raises several unrelated types for bad text
        raise UnitProblem(f"is not a quantity, e.g. '{example}' (got {value!r})") from exc
    if not isinstance(quantity, pint.Quantity) or quantity.dimensionless:
        raise UnitProblem(f"needs a unit, e.g. '{example}' (got {value!r})")
    if quantity.dimensionality != registry().get_dimensionality(dims):
        raise UnitProblem(f"must be a {kind}, e.g. '{example}' (got {value!r})")
    return float(quantity.to(si_unit).magnitude)


def format_si(value: float, unit: str, digits: int = 4) -> str:
    """Engineering notation for people: 0.0018403 A -> '1.840 mA'."""
    if value != value:  # NaN
        return "—"
    if value in (float("inf"), float("-inf")):
        return f"{'-' if value < 0 else ''}∞ {unit}"
    prefixes = [
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
    ]
    magnitude = abs(value)
    for scale, prefix in prefixes:
        if magnitude >= scale * 0.9995:
            return f"{value / scale:.{digits}g} {prefix}{unit}"
    return f"{value / 1e-12:.{digits}g} p{unit}"
