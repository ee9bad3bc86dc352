"""Reply styles a dialect may allow beyond the SCPI forms; each refused unless asked for."""

from __future__ import annotations

import pytest

from instruments.errors import ReplyError
from instruments.scpi import parse_bool, parse_error_entry, parse_status


def test_boolean_words_only_when_asked() -> None:
    assert parse_bool("ON", words=True) is True
    assert parse_bool("off", words=True) is False
    assert parse_bool("1", words=True) is True
    with pytest.raises(ReplyError):
        parse_bool("ON")
    with pytest.raises(ReplyError):
        parse_bool("YES", words=True)


def test_error_text_without_quotes_only_when_asked() -> None:
    assert parse_error_entry("-113,Undefined header", quoted=False) == (-113, "Undefined header")
    assert parse_error_entry('0,"No error"', quoted=False) == (0, "No error")
    with pytest.raises(ReplyError):
        parse_error_entry("-113,Undefined header")
    with pytest.raises(ReplyError):
        parse_error_entry('-113,"open', quoted=False)  # a half-quoted entry is still garbage


def test_status_words_as_floats_only_when_asked() -> None:
    assert parse_status("+8.000000E+00", as_float=True) == 8
    assert parse_status("2", as_float=True) == 2
    assert parse_status("+2") == 2
    with pytest.raises(ReplyError):
        parse_status("+8.000000E+00")
    with pytest.raises(ReplyError):
        parse_status("8.5", as_float=True)  # not a whole number: not a status word
