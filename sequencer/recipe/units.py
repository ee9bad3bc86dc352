"""Numbers and units from user files, read once at the edge; inside, everything is SI floats.

A quantity is a plain decimal number and one unit name, never an expression: the number is read
here by a strict pattern (sign, digits, optional fraction, optional exponent) and must be
finite; pint (one registry) is given the unit name alone and converts it. So `0*1e999 V`,
`9**9**9 V`, `+nan V` and `60,0 V` are refused with one line instead of being evaluated, and
practitioners' spellings (`MOhm`, `kΩ`, `µA`, `uA`) are read as meant, while the case traps
`mohm` (milliohm where a megaohm was meant), `MV`, `MA`, `MW` and `Ms` are refused with the
spelling that was probably meant.

pint stays the authority, but it takes longer to load than the rest of `ccbench check`: the
common spellings (an SI symbol with a prefix from pico to giga, `2 mA`, `100 kohm`) are read
from a table of their factors, which tests/recipe/test_units_fast.py holds to pint's own result
bit for bit; every other unit goes to pint, loaded when it is first needed.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache
from typing import TYPE_CHECKING

from sequencer.model.errors import one_line

if TYPE_CHECKING:
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

# A plain decimal number: what a person writes, nothing Python or YAML adds ("1_0", "0x1F",
# "1:30", "inf"). ASCII digits only (\d would take any script's digits).
PLAIN_NUMBER = r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"
_NUMBER = re.compile(PLAIN_NUMBER)
_WITH_COMMA = re.compile(r"[+-]?[0-9.]*[0-9],[0-9][0-9.,]*")  # a number written with a comma
_UNIT_NAME = re.compile(r"[A-Za-z]+")

# Nothing a bench test sets lies outside femto to peta in SI units (1 fA to 1 POhm, say): a
# value beyond is a typing slip, refused rather than passed on (common practice, no source).
SMALLEST_SI = 1e-15
LARGEST_SI = 1e15

# Spellings that mean one pint name: the ohm sign and Greek omega, the micro sign and Greek mu
# (pint reads the last two, but one spelling keeps the traps below simple); "Ohm" and "OHM"
# are made "ohm" too (pint's names are case-sensitive; the prefix before it keeps its case).
_SPELLINGS = (("\u2126", "ohm"), ("\u03a9", "ohm"), ("\u00b5", "u"), ("\u03bc", "u"))
_NAMES = {"amps": "amp", "Amps": "amp", "Amp": "amp"}  # pint reads "amps" as attometre/second
# Case traps: what was written -> (what was probably meant, its name, the name of what was
# written, which is accepted from a user who really means it).
_TRAPS: dict[str, tuple[str, str, str]] = {
    "MV": ("mV", "millivolt", "megavolt"),
    "MA": ("mA", "milliampere", "megaampere"),
    "MW": ("mW", "milliwatt", "megawatt"),
    "Ms": ("ms", "millisecond", "megasecond"),
}
_SYMBOL = {"voltage": "V", "current": "A", "power": "W", "time": "s", "resistance": "ohm",
           "frequency": "Hz"}  # fmt: skip
_PREFIXES = ("p", "n", "u", "m", "", "k", "M", "G")
_FACTORS = (1e-12, 1e-9, 1e-6, 1e-3, 1.0, 1e3, 1e6, 1e9)

# The fast path: kind -> {unit name -> factor to the kind's SI unit}, every prefixed symbol
# except the case traps (refused before this table is read, and kept out of it all the same).
COMMON_UNITS: dict[str, dict[str, float]] = {
    kind: {
        prefix + symbol: factor
        for prefix, factor in zip(_PREFIXES, _FACTORS, strict=True)
        if prefix + symbol not in _TRAPS and prefix + symbol != "mohm"
    }
    for kind, symbol in _SYMBOL.items()
}


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    import pint  # start-up speed: the common units never need it (COMMON_UNITS)

    return pint.UnitRegistry()


class UnitProblem(ValueError):
    """Raised with a short description; the recipe loader adds file, line and field."""


def plain_number(text: str) -> float:
    """A finite float from a plain decimal number ('1.8', '-2.5e-3'); anything else is refused
    with UnitProblem: Python's and YAML's extras ('0.001_8', '1:30', '0x10'), 'nan', 'inf',
    a number too large for a float ('1e999') and a decimal comma ('1,8')."""
    field = text.strip()
    if _WITH_COMMA.fullmatch(field):
        raise UnitProblem(f"{_comma_hint(field)} (got {text!r})")
    if not _NUMBER.fullmatch(field):
        raise UnitProblem(f"is not a plain decimal number such as 1.8 or -2.5e-3 (got {text!r})")
    return _finite(field, text)


def _finite(field: str, shown: object) -> float:
    value = float(field)
    if not math.isfinite(value):
        raise UnitProblem(f"is too large a number (got {shown!r})")
    return value


def parse_quantity(value: object, kind: str) -> float:
    """Parse '25 V', '2 mA', '0.5 MOhm' into a finite SI float of the given kind.

    Bare numbers are refused: a number without a unit is the commonest recipe mistake and the
    consequences (25 A instead of 25 mA) are not ones to guess at.
    """
    _, si_unit, example = KINDS[kind]
    if isinstance(value, bool) or value is None:
        raise UnitProblem(f"must be a {kind} with a unit, e.g. '{example}' (got {value!r})")
    if isinstance(value, int | float):
        raise UnitProblem(f"needs a unit, e.g. '{example}' (got {value!r})")
    text = str(value).strip()
    if not text:
        raise UnitProblem(f"must be a {kind} with a unit, e.g. '{example}' (got {value!r})")
    number_text, rest = _split_number(text, value, example)
    name = _unit_name(rest.strip(), kind, value, example)
    number = _finite(number_text, value)
    factor = COMMON_UNITS[kind].get(name)
    if factor is not None:
        si = number * factor  # what pint gives for these, bit for bit (see the module's note)
    else:
        si = float(
            registry().Quantity(number, _unit(name, kind, value, example)).to(si_unit).magnitude
        )
    if not math.isfinite(si) or (si and not SMALLEST_SI <= abs(si) <= LARGEST_SI):
        raise UnitProblem(
            f"must be 0 or lie between {SMALLEST_SI:g} and {LARGEST_SI:g} {si_unit} in size "
            f"(got {value!r})"
        )
    return si


def _split_number(text: str, value: object, example: str) -> tuple[str, str]:
    """The number at the start of `text` and what follows it; refuse what cannot be one."""
    comma = _WITH_COMMA.match(text)
    if comma is not None:
        raise UnitProblem(f"{_comma_hint(comma.group(), text[comma.end() :])} (got {value!r})")
    match = _NUMBER.match(text)
    if match is None:
        if re.match(r"[+-]?(?:nan|inf)", text, re.IGNORECASE):
            raise UnitProblem(f"must be a finite number (got {value!r})")
        if text[:1] and text[:1] in "\u2212\u2013":  # a minus sign or a dash copied from a document
            raise UnitProblem(f"must start with a plain '-' sign, not {text[0]!r} (got {value!r})")
        raise UnitProblem(f"must start with a number, e.g. '{example}' (got {value!r})")
    number, rest = text[: match.end()], text[match.end() :]
    if re.match(r"\s*[0-9.]|[_'][0-9]", rest):
        raise UnitProblem(
            f"must be one number without spaces or separators inside, e.g. '1000 V' (got {value!r})"
        )
    if re.match(r"\s*[-+*/^()%]", rest):
        raise UnitProblem(
            f"must be a number and a unit, not a calculation: write the value, e.g. "
            f"'{example}' (got {value!r})"
        )
    return number, rest


def _comma_hint(number: str, unit: str = "") -> str:
    """What to write instead of a number with a comma (a decimal comma, or thousands)."""
    after = f" {one_line(unit.strip())}" if unit.strip() else ""  # a unit may hold a newline
    whole, _, rest = one_line(number).partition(",")
    if "," not in rest and "." not in number and len(rest) != 3:
        return f"has a decimal comma: write {whole}.{rest}{after}: a decimal point, not a comma"
    if "," not in rest and "." not in number:
        return (
            f"has a comma in its number: write {whole}{rest}{after} or {whole}.{rest}{after}, "
            "whichever you mean: a decimal point, and no thousands separators"
        )
    return "has a comma in its number: write it with a decimal point and no thousands separators"


def _unit_name(text: str, kind: str, value: object, example: str) -> str:
    """One unit name in the spelling pint reads, checked against the case traps."""
    if not text:
        raise UnitProblem(f"needs a unit, e.g. '{example}' (got {value!r})")
    name = _NAMES.get(text, text)
    for written, meant in _SPELLINGS:
        name = name.replace(written, meant)
    cut = name.lower().rfind("ohm")
    if cut >= 0 and name.lower()[cut:] in ("ohm", "ohms"):
        name = name[:cut] + name[cut:].lower()
    if not _UNIT_NAME.fullmatch(name):
        raise UnitProblem(f"needs one unit name after the number, e.g. '{example}' (got {value!r})")
    _refuse_traps(name, kind, value)
    return name


def _unit(name: str, kind: str, value: object, example: str) -> pint.Unit:
    """The pint unit of a unit name from `_unit_name`, checked against the kind."""
    try:
        unit = registry().parse_units(name)
    except Exception:  # pint raises several unrelated types for a name it does not know
        hint = _suggest(name, kind)
        raise UnitProblem(f"has a unit ccbench does not know{hint}, e.g. '{example}' "
                          f"(got {value!r})") from None  # fmt: skip
    if unit.dimensionality != registry().get_dimensionality(KINDS[kind][0]):
        hint = _suggest(name, kind)
        raise UnitProblem(f"must be a {kind}{hint}, e.g. '{example}' (got {value!r})")
    return unit


def _refuse_traps(name: str, kind: str, value: object) -> None:
    """Spellings that pint reads, but almost never as the writer meant them."""
    if kind == "resistance" and name in ("mohm", "mohms"):
        raise UnitProblem(
            f"reads as milliohm: did you mean 'MOhm' (megaohm)? write 'milliohm' if you really "
            f"mean it (got {value!r})"
        )
    if name in _TRAPS:
        meant, meant_name, written_name = _TRAPS[name]
        raise UnitProblem(
            f"reads as {written_name}: did you mean '{meant}' ({meant_name})? write "
            f"'{written_name}' if you really mean it (got {value!r})"
        )
    if name[:1] == "K" and name[1:] in _SYMBOL.values():
        raise UnitProblem(f"has a capital K: did you mean 'k{name[1:]}'? kilo is a lower-case k "
                          f"(got {value!r})")  # fmt: skip


def _suggest(name: str, kind: str) -> str:
    """' (did you mean 'mV'?)' when `name` is a prefixed symbol of `kind` in the wrong case."""
    symbol = _SYMBOL[kind]
    for prefix in _PREFIXES:
        if name.lower() == (prefix + symbol).lower() and name != prefix + symbol:
            return f" (did you mean '{prefix + symbol}'?)"
    return ""


# Temperatures: a set point is absolute ('85 degC', '358.15 K'); a band or a rate is a difference,
# written in kelvin ('0.5 K', '2 K/min'), because '0.5 degC' would read as an absolute 0.5 degC.
_TEMPERATURE_UNITS = {"degC": "degC", "C": "degC", "K": "kelvin"}
_RATE_UNITS = {"K/s": 1.0, "K/min": 1 / 60, "K/h": 1 / 3600}


def parse_temperature_c(value: object) -> float:
    """An absolute temperature in degC from '85 degC', '-20 degC' or '253.15 K'."""
    number, unit = _number_and_unit(value, "a temperature", "85 degC", _TEMPERATURE_UNITS)
    # degC as written; kelvin less 273.15, as pint converts it (tests/recipe/test_units_fast.py)
    kelvin_to_c = number if _TEMPERATURE_UNITS[unit] == "degC" else number - 273.15
    celsius = round(float(kelvin_to_c), 9)  # 253.15 K is -20 degC, not -19.99999999999997
    if celsius < -273.15:
        raise UnitProblem(f"is below absolute zero (got {value!r})")
    return celsius


def parse_temperature_step_k(value: object) -> float:
    """A temperature difference in kelvin, written in K ('0.5 K')."""
    number, _ = _number_and_unit(value, "a temperature difference", "0.5 K", {"K": "K"})
    return number


def parse_rate_k_per_s(value: object) -> float:
    """A rate of temperature change in K/s from '2 K/min', '0.1 K/s' or '60 K/h'."""
    number, unit = _number_and_unit(value, "a rate", "2 K/min", _RATE_UNITS)
    return number * _RATE_UNITS[unit]


def _number_and_unit(
    value: object, what: str, example: str, units: dict[str, object]
) -> tuple[float, str]:
    if isinstance(value, bool) or not isinstance(value, str):
        raise UnitProblem(f"must be {what} with a unit, e.g. '{example}' (got {value!r})")
    number_text, rest = _split_number(value.strip(), value, example)
    unit = rest.strip()
    if unit not in units:
        known = ", ".join(units)
        raise UnitProblem(f"must be {what} in {known}, e.g. '{example}' (got {value!r})")
    return _finite(number_text, value), unit
