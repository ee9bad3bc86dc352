"""SI values shown to people: engineering notation with the unit's prefix. Parsing units is the
recipe reader's job (`sequencer.recipe.units`, with pint); inside, everything is SI floats."""

from __future__ import annotations


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
