"""Quantities are a plain number and one unit name, never an expression; numbers in user files
are plain decimal and finite. Each refusal is one short line the loader prefixes with
file:line: field."""

from __future__ import annotations

import math
from datetime import timedelta

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sequencer.recipe.units import (
    KINDS,
    LARGEST_SI,
    SMALLEST_SI,
    UnitProblem,
    parse_quantity,
    plain_number,
    registry,
)

# SI prefixes (BIPM, The International System of Units, 9th ed., table 7): the oracle for what
# an accepted spelling is worth, written here rather than taken from the code under test.
PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3, "": 1.0,
          "k": 1e3, "M": 1e6, "G": 1e9}  # fmt: skip


@pytest.mark.parametrize(
    ("text", "kind", "si"),
    [
        ("1 MOhm", "resistance", 1e6),
        ("1 MΩ", "resistance", 1e6),  # U+03A9 Greek capital omega
        ("1 MΩ", "resistance", 1e6),  # U+2126 ohm sign
        ("100 kΩ", "resistance", 1e5),
        ("100 kohm", "resistance", 1e5),
        ("0.5 Mohm", "resistance", 5e5),
        ("250 milliohm", "resistance", 0.25),  # said in full, a milliohm is accepted
        ("300 µA", "current", 3e-4),  # U+00B5 micro sign
        ("300 μA", "current", 3e-4),  # U+03BC Greek small mu
        ("300 uA", "current", 3e-4),
        ("3 mV", "voltage", 3e-3),
        ("25V", "voltage", 25.0),
        ("-5 V", "voltage", -5.0),
        ("+1.5e-3 A", "current", 1.5e-3),
        (".5 V", "voltage", 0.5),
        ("2 amps", "current", 2.0),  # pint alone reads "amps" as attometres per second
        ("10 min", "time", 600.0),
        ("0 V", "voltage", 0.0),
    ],
)
def test_practitioners_spellings_are_read_as_meant(text, kind, si):
    assert parse_quantity(text, kind) == pytest.approx(si, rel=1e-12)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("text", "kind", "words"),
    [
        # red team 1 and 14: expressions were evaluated; 9**9**9 hung, 2**10000 overflowed
        ("0*1e999 V", "voltage", "must be a number and a unit, not a calculation"),
        ("9**9**9 V", "voltage", "not a calculation"),
        ("2**10000 V", "voltage", "not a calculation"),
        ("5 V*2", "voltage", "needs one unit name after the number"),
        ("+nan V", "voltage", "must be a finite number"),
        ("-inf V", "voltage", "must be a finite number"),
        ("1e999 V", "voltage", "is too large a number"),
        ("1e20 V", "voltage", "must be 0 or lie between 1e-15 and 1e+15 V in size"),
        ("1e-20 A", "current", "must be 0 or lie between"),
        # red team 2: a decimal comma multiplied the value by ten
        ("60,0 V", "voltage", "write 60.0 V: a decimal point, not a comma"),
        ("1,8 mA", "current", "write 1.8 mA: a decimal point, not a comma"),
        ("0,5 mA", "current", "write 0.5 mA: a decimal point, not a comma"),
        ("1,000 V", "voltage", "write 1000 V or 1.000 V, whichever you mean"),
        ("1.000,5 V", "voltage", "no thousands separators"),
        ("1 000 V", "voltage", "without spaces or separators"),
        ("1_000 V", "voltage", "without spaces or separators"),
        # case traps
        ("0.1 mohm", "resistance", "did you mean 'MOhm' (megaohm)? write 'milliohm' if you"),
        ("0.1 mΩ", "resistance", "did you mean 'MOhm' (megaohm)?"),
        ("0.1 mOhm", "resistance", "did you mean 'MOhm' (megaohm)?"),
        ("5 MV", "voltage", "did you mean 'mV' (millivolt)?"),
        ("5 MA", "current", "did you mean 'mA' (milliampere)?"),
        ("250 MW", "power", "did you mean 'mW' (milliwatt)?"),
        ("5 Ms", "time", "did you mean 'ms' (millisecond)?"),
        ("100 KΩ", "resistance", "did you mean 'kohm'?"),
        ("5 mv", "voltage", "did you mean 'mV'?"),
        ("5 ma", "current", "did you mean 'mA'?"),
        ("−5 V", "voltage", "plain '-' sign"),
        ("", "voltage", "must be a voltage with a unit"),
        ("25", "voltage", "needs a unit"),
    ],
)
def test_refusals_say_what_to_write(text, kind, words):
    with pytest.raises(UnitProblem) as info:
        parse_quantity(text, kind)
    assert words in str(info.value)
    assert "\n" not in str(info.value)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("0.001_8", "is not a plain decimal number"),  # red team 27: Python's float() took it
        ("1:30", "is not a plain decimal number"),
        ("0x10", "is not a plain decimal number"),
        ("nan", "is not a plain decimal number"),
        ("infinity", "is not a plain decimal number"),
        ("1e999", "is too large a number"),
        ("1,8", "write 1.8: a decimal point, not a comma"),
        ("١٢", "is not a plain decimal number"),  # Arabic-Indic digits: float() reads them
    ],
)
def test_plain_numbers_only(text, words):
    with pytest.raises(UnitProblem, match=words):
        plain_number(text)


def test_plain_numbers_read_as_written():
    assert [plain_number(t) for t in ("1.8", "-2.5e-3", " 3 ", "+0", ".5", "5.")] == [
        1.8, -2.5e-3, 3.0, 0.0, 0.5, 5.0]  # fmt: skip


# --- property: any text gives a finite SI float of its kind, or a UnitProblem ------------

NUMBERS = st.one_of(
    st.floats(-1e4, 1e4).map(lambda x: f"{x:.6g}"),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
    st.integers(-(10**30), 10**30).map(str),
    st.sampled_from(["nan", "+inf", "1e999", "2**10000", "9**9**9", "0*1e999", "1,5", "1_0",
                     "0x1F", "1:30", "(1)", "1e", ".", "-", "١"]),
)  # fmt: skip
UNITS = st.one_of(
    st.sampled_from(["V", "mV", "kV", "A", "mA", "uA", "µA", "μA", "W", "mW", "s", "ms", "min",
                     "h", "Hz", "ohm", "kohm", "MOhm", "MΩ", "mohm", "MV", "V*2", "V**9**9",
                     "V/s", "m*V", "nan", "e", "", "degC", "Ω", "KV"]),
    st.text(max_size=8),
)  # fmt: skip
TEXTS = st.one_of(
    st.text(max_size=30),
    st.builds(lambda n, sep, u: f"{n}{sep}{u}", NUMBERS, st.sampled_from(["", " ", "  "]), UNITS),
)


KIND_UNITS = {"voltage": ["V", "mV", "kV", "uV", "MV"], "current": ["A", "mA", "uA", "µA", "nA"],
              "power": ["W", "mW", "kW", "MW"], "time": ["s", "ms", "us", "min", "h", "Ms"],
              "resistance": ["ohm", "kohm", "MOhm", "MΩ", "kΩ", "mohm", "GOhm"],
              "frequency": ["Hz", "kHz"]}  # fmt: skip


def texts_for(kind: str) -> st.SearchStrategy[str]:
    """Any text, or a number and a unit, often of the kind asked for."""
    units = st.one_of(UNITS, st.sampled_from(KIND_UNITS[kind]))
    spaced = st.sampled_from(["", " ", "  "])
    return st.one_of(TEXTS, st.builds(lambda n, sep, u: f"{n}{sep}{u}", NUMBERS, spaced, units))


def _warm_registry() -> None:
    registry().parse_units("V")  # building pint's registry is a one-off cost, not an example's


@settings(max_examples=400, deadline=timedelta(seconds=1))  # a hang fails, not a slow machine
@given(kind=st.sampled_from(sorted(KINDS)), data=st.data())
def test_any_text_is_a_finite_quantity_of_its_kind_or_a_unit_problem(kind, data):
    _warm_registry()
    text = data.draw(texts_for(kind), label="text")
    try:
        value = parse_quantity(text, kind)
    except UnitProblem as exc:
        assert str(exc) and "\n" not in str(exc)
        return
    assert isinstance(value, float) and math.isfinite(value)
    assert value == 0 or SMALLEST_SI <= abs(value) <= LARGEST_SI
    si_unit = KINDS[kind][1]
    assert parse_quantity(f"{value!r} {si_unit}", kind) == value  # it says what it is


@settings(max_examples=200, deadline=timedelta(seconds=1))
@given(
    number=st.floats(1e-3, 1e3, allow_nan=False).map(lambda x: float(f"{x:.6g}")),
    sign=st.sampled_from(["", "-", "+"]),
    prefix=st.sampled_from(sorted(PREFIX)),
    kind_symbol=st.sampled_from([("voltage", "V"), ("current", "A"), ("power", "W"),
                                 ("resistance", "ohm"), ("resistance", "Ω")]),
)  # fmt: skip
def test_well_formed_quantities_are_worth_number_times_prefix(number, sign, prefix, kind_symbol):
    kind, symbol = kind_symbol
    text = f"{sign}{number!r} {prefix}{symbol}"
    if (prefix, symbol) in (("m", "ohm"), ("m", "Ω"), ("M", "V"), ("M", "A"), ("M", "W")):
        with pytest.raises(UnitProblem, match="did you mean"):
            parse_quantity(text, kind)
        return
    expected = (-1 if sign == "-" else 1) * number * PREFIX[prefix]
    assert parse_quantity(text, kind) == pytest.approx(expected, rel=1e-12)
