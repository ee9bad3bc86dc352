"""SCPI text helpers: NR3 numbers, special values, compound replies, error entries, blocks."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from instruments.errors import ReplyError
from instruments.scpi import (
    SCPI_INF,
    SCPI_NAN,
    check_message,
    flat_fields,
    format_number,
    make_block,
    parse_block,
    parse_block_header,
    parse_bool,
    parse_error_entry,
    parse_int,
    parse_number,
    split_reply,
)

# NR3 as IEEE 488.2 7.7.2 (from memory): sign, one digit, point, digits, E, signed exponent.
NR3 = re.compile(r"-?\d\.\d{6,16}E[+-]\d{2,3}")
finite = st.floats(allow_nan=False, allow_infinity=False)


@given(finite)
def test_format_number_round_trips_exactly(value: float) -> None:
    text = format_number(value)
    assert NR3.fullmatch(text), text
    assert float(text) == value


@given(finite.filter(lambda v: abs(v) not in (SCPI_INF, SCPI_NAN)))
def test_parse_number_reads_what_format_number_writes(value: float) -> None:
    assert parse_number(format_number(value)) == value


@pytest.mark.parametrize(
    ("value", "text"),
    [(2.5, "2.500000E+00"), (25, "2.500000E+01"), (-1e-3, "-1.000000E-03"), (0.0, "0.000000E+00")],
)
def test_format_number_uses_six_decimals_when_they_suffice(value: float, text: str) -> None:
    assert format_number(value) == text


def test_format_number_adds_digits_only_when_needed() -> None:
    assert format_number(0.1 + 0.2) == "3.0000000000000004E-01"


@pytest.mark.parametrize("value", [math.inf, -math.inf, math.nan])
def test_format_number_refuses_non_finite(value: float) -> None:
    with pytest.raises(ValueError, match="finite"):
        format_number(value)


# SCPI-1999 Vol 1 7.2.1.4-7.2.1.5: INF -> 9.9E+37, NINF -> -9.9E+37, NAN -> 9.91E+37.
@pytest.mark.parametrize(
    ("text", "expected"),
    [("9.9E+37", math.inf), ("+9.90000E+37", math.inf), ("-9.9E+37", -math.inf)],
)
def test_special_values_become_infinities(text: str, expected: float) -> None:
    assert parse_number(text) == expected


def test_special_nan_becomes_nan() -> None:
    assert math.isnan(parse_number("9.91E+37"))  # SCPI-1999 Vol 1 7.2.1.5


@pytest.mark.parametrize("text", ["+1.234567E-03", "5", "0.005", "-.5", "1e3", " +2.5E+01 "])
def test_parse_number_accepts_nr1_nr2_nr3(text: str) -> None:
    assert parse_number(text) == float(text)


@pytest.mark.parametrize("text", ["", "abc", "1_0", "nan", "inf", "1.2.3", "1E", "0x10", "1,2"])
def test_parse_number_refuses_what_is_not_nrf(text: str) -> None:
    with pytest.raises(ReplyError, match="not a number"):
        parse_number(text)


def test_parse_int_and_bool() -> None:
    assert parse_int("+2") == 2
    assert parse_int("0") == 0
    assert parse_bool("1") is True
    assert parse_bool("0") is False
    with pytest.raises(ReplyError):
        parse_int("2.0")
    with pytest.raises(ReplyError):
        parse_bool("ON")


def test_split_reply_units_and_fields() -> None:
    assert split_reply("+2.5E+01,+1.8E-03;0") == [["+2.5E+01", "+1.8E-03"], ["0"]]
    assert flat_fields("+2.5E+01,+1.8E-03;0") == ["+2.5E+01", "+1.8E-03", "0"]


def test_split_reply_keeps_separators_inside_quotes() -> None:
    reply = '-113,"Undefined header;MEASU:CURR?";1'
    assert split_reply(reply) == [["-113", '"Undefined header;MEASU:CURR?"'], ["1"]]
    assert split_reply('\'a,b\',"c""d,e"') == [["'a,b'", '"c""d,e"']]


def test_split_reply_refuses_an_open_quote() -> None:
    with pytest.raises(ReplyError, match="balanced quotes"):
        split_reply('-113,"Undefined header')


# Entry format of SYSTem:ERRor[:NEXT]? per SCPI-1999 Vol 2 21.8.8.
@pytest.mark.parametrize(
    ("text", "entry"),
    [
        ('0,"No error"', (0, "No error")),
        ('-113,"Undefined header;detail"', (-113, "Undefined header;detail")),
        ('-222, "Data out of range;VOLT 500"', (-222, "Data out of range;VOLT 500")),
        ('+42,""', (42, "")),
        ('-100,"say ""hi"""', (-100, 'say "hi"')),
    ],
)
def test_parse_error_entry(text: str, entry: tuple[int, str]) -> None:
    assert parse_error_entry(text) == entry


@pytest.mark.parametrize("text", ["", "-113", 'x,"text"', '-113,"open', "1.5"])
def test_parse_error_entry_refuses_malformed(text: str) -> None:
    with pytest.raises(ReplyError, match="error entry"):
        parse_error_entry(text)


def test_block_round_trip_with_lf_bytes_in_payload() -> None:
    lf_rich = np.full(8, 0x0A0A0A0A, dtype="<u4").view("<f4")  # every byte is 0x0A
    data = make_block(lf_rich.tobytes()) + b"\n"
    assert data.count(b"\n") == 33
    np.testing.assert_array_equal(parse_block(data), lf_rich)


@given(st.lists(st.floats(width=32, allow_nan=False), max_size=200), st.booleans())
def test_block_round_trip(values: list[float], big_endian: bool) -> None:
    array = np.array(values, dtype=">f4" if big_endian else "<f4")
    parsed = parse_block(make_block(array.tobytes()), big_endian=big_endian)
    np.testing.assert_array_equal(parsed, array)


def test_block_in_the_wrong_byte_order_gives_other_numbers() -> None:
    # SCPI.md 0 item 8: the wrong order is not an error on the wire, so the order must be stated.
    array = np.array([1e-3, 2e-3], dtype=">f4")
    wrong = parse_block(make_block(array.tobytes()), big_endian=False)
    assert not np.allclose(wrong, array)


def test_block_header_lengths() -> None:
    assert make_block(b"x" * 12) == b"#212" + b"x" * 12  # IEEE 488.2 7.7.6 definite form
    assert parse_block_header(b"#212" + b"x" * 12) == (4, 12)


@pytest.mark.parametrize(
    ("data", "match"),
    [
        (make_block(b"12345678")[:-1], "block of 8 bytes"),  # one byte short
        (make_block(b"12345678") + b"99", "block of 8 bytes"),  # longer than declared
        (b"#0" + b"12345678\n", "indefinite"),
        (b"1.5,2.5\n", "definite-length block"),
        (b"#3" + b"12", "decimal length"),
        (make_block(b"123456"), "whole 4-byte items"),
    ],
)
def test_bad_blocks_are_refused(data: bytes, match: str) -> None:
    with pytest.raises(ReplyError, match=match):
        parse_block(data)


def test_messages_must_not_carry_their_own_terminator() -> None:
    assert check_message("OUTP OFF") == "OUTP OFF"
    with pytest.raises(ValueError, match="newline"):
        check_message("OUTP OFF\n")
