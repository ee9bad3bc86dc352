"""The instrument errors: builtin bases, messages that say what/where/what to do, pickling."""

from __future__ import annotations

import pickle

import pytest

from instruments.errors import (
    DialectError,
    InstrumentDisconnected,
    InstrumentError,
    InstrumentTimeout,
    ReplyError,
    ScpiError,
)

RESOURCE = "TCPIP0::127.0.0.1::5025::SOCKET"

EXAMPLES = [
    InstrumentError(RESOURCE, "OUTP ON", "something odd", hint="look at it"),
    InstrumentTimeout(RESOURCE, "READ?", "no complete reply within 2 s"),
    InstrumentDisconnected(RESOURCE, None, "connection refused"),
    ReplyError(RESOURCE, "OUTP?", "reply 'x' is not a boolean"),
    ScpiError(RESOURCE, "SOUR:VOLT 5E+02", -222, "Data out of range", entries=[(-222, "D")]),
    DialectError("my.yaml", "set_voltage", 12, "must contain {volts}"),
]


@pytest.mark.parametrize("error", EXAMPLES, ids=lambda e: type(e).__name__)
def test_every_error_pickles_with_its_fields(error: InstrumentError) -> None:
    copy = pickle.loads(pickle.dumps(error))
    assert type(copy) is type(error)
    assert str(copy) == str(error)
    assert copy.__dict__ == error.__dict__


@pytest.mark.parametrize(
    ("error", "builtin"),
    [
        (EXAMPLES[1], TimeoutError),
        (EXAMPLES[2], ConnectionError),
        (EXAMPLES[3], ValueError),
        (EXAMPLES[5], ValueError),
    ],
)
def test_concrete_errors_are_also_builtins(error: InstrumentError, builtin: type) -> None:
    assert isinstance(error, InstrumentError)
    assert isinstance(error, builtin)


def test_message_says_what_where_and_what_to_do() -> None:
    error = InstrumentTimeout(RESOURCE, "READ?", "no complete reply within 2 s")
    text = str(error)
    assert text.startswith("no complete reply within 2 s")
    assert RESOURCE in text
    assert "'READ?'" in text
    assert "raise the timeout" in text  # the default hint of a timeout


def test_timeout_is_not_mistaken_for_an_errno() -> None:
    # OSError subclasses parse 2+ constructor arguments as (errno, strerror): ours must not.
    error = InstrumentTimeout(RESOURCE, "READ?", "late")
    assert error.errno is None
    assert error.args == (str(error),)


def test_scpi_error_lists_every_entry_and_hints_by_class() -> None:
    entries = [(-113, "Undefined header"), (-222, "Data out of range;VOLT 500")]
    error = ScpiError(RESOURCE, "VOLT 500", -113, "Undefined header", entries=entries)
    assert (error.code, error.text) == (-113, "Undefined header")
    assert '-113,"Undefined header"; -222,"Data out of range;VOLT 500"' in str(error)
    assert "2 errors" in str(error)
    assert "dialect" in str(error)  # SCPI-1999 Vol 2 21.8: -1xx are command errors


def test_dialect_error_names_file_line_and_key() -> None:
    error = DialectError("station/mine.yaml", "set_voltage", 12, "must contain {volts}")
    assert str(error).startswith("station/mine.yaml:12: key 'set_voltage': must contain {volts}")
    assert (error.file, error.key, error.line) == ("station/mine.yaml", "set_voltage", 12)
