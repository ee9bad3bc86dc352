"""Dialect files: the packaged one loads; broken ones fail with file, line and key."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
import yaml

from instruments.dialect import DIALECT_DIR, Dialect, load_dialect
from instruments.errors import DialectError

PACKAGED = DIALECT_DIR / "scpi1999.yaml"


def test_packaged_dialect_has_exactly_the_dataclass_fields() -> None:
    keys = set(yaml.safe_load(PACKAGED.read_text()))
    field_names = {f.name for f in dataclasses.fields(Dialect)} - {"source", "key_lines"}
    assert keys == field_names


def test_packaged_dialect_by_name_and_by_path_agree() -> None:
    by_name = load_dialect("scpi1999")
    assert by_name == load_dialect(PACKAGED)
    assert by_name.measure_fields == ("voltage", "current", "status", "errors")
    assert by_name.source == str(PACKAGED)


def _write_variant(tmp_path: Path, old: str, new: str) -> Path:
    text = PACKAGED.read_text()
    assert old in text, old
    path = tmp_path / "variant.yaml"
    path.write_text(text.replace(old, new, 1))
    return path


def _line_of(path: Path, needle: str) -> int:
    return next(n for n, line in enumerate(path.read_text().splitlines(), 1) if needle in line)


def test_unknown_key_names_file_key_and_line(tmp_path: Path) -> None:
    path = _write_variant(tmp_path, 'reset: "*RST"', 'reset: "*RST"\nrest: "*RST"')
    with pytest.raises(DialectError) as caught:
        load_dialect(path)
    error = caught.value
    assert (error.key, error.line) == ("rest", _line_of(path, "rest:"))
    assert str(error).startswith(f"{path}:{error.line}: key 'rest': unknown key")


def test_missing_key_is_named(tmp_path: Path) -> None:
    path = _write_variant(tmp_path, 'output_query: "OUTP?"', "")
    with pytest.raises(DialectError, match="key 'output_query': missing") as caught:
        load_dialect(path)
    assert str(path) in str(caught.value)


def test_voltage_text_without_its_placeholder_is_refused(tmp_path: Path) -> None:
    # A constant level would silently ignore every programmed voltage.
    path = _write_variant(tmp_path, '"SOUR:VOLT {volts}"', '"SOUR:VOLT 0"')
    with pytest.raises(DialectError, match=r"must contain \{volts\}") as caught:
        load_dialect(path)
    assert caught.value.line == _line_of(path, "set_voltage:")


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        ('measure: "READ?;:STAT:QUES:COND?;:SYST:ERR:COUN?"', "measure: null", "must not be null"),
        ('"SYST:INT?"', '"SYST:INT? {channel}"', "must contain no placeholder"),
        ("compliance_bit: 1", "compliance_bit: true", "bit number"),
        ("[voltage, current, status, errors]", "[voltage, status]", "'current' exactly once"),
        ("[voltage, current, status, errors]", "[voltage, current, temp]", "unknown"),
        ("[voltage, current, status, errors]", "[voltage, current]", "no 'status' field"),
        ("status, errors]", "status, errors, errors]", "'errors' more than once"),
        ('reset: "*RST"', "reset: 5", "must be text"),
        ('"OUTP {state}"', '"OUTP {state"', "bad braces"),
        # YAML 1.1 reads these as 8 (octal), 2 and 4096: plain decimal whole numbers only
        ("compliance_bit: 1", "compliance_bit: 010", "plain decimal whole number"),
        ("compliance_bit: 1", "compliance_bit: 0b10", "plain decimal whole number"),
        ("max_message_bytes: 4096", "max_message_bytes: 4_096", "plain decimal whole number"),
    ],
)
def test_broken_values_are_refused(tmp_path: Path, old: str, new: str, match: str) -> None:
    with pytest.raises(DialectError, match=match):
        load_dialect(_write_variant(tmp_path, old, new))


def test_invalid_yaml_gives_its_line(tmp_path: Path) -> None:
    path = _write_variant(tmp_path, 'reset: "*RST"', 'reset: "*RST\n  broken: [')
    with pytest.raises(DialectError, match="not valid YAML") as caught:
        load_dialect(path)
    assert caught.value.line is not None


def test_missing_file_is_a_dialect_error(tmp_path: Path) -> None:
    with pytest.raises(DialectError, match="cannot read"):
        load_dialect(tmp_path / "absent.yaml")


def test_nullable_keys_may_be_null(tmp_path: Path) -> None:
    path = _write_variant(tmp_path, 'interlock_query: "SYST:INT?"', "interlock_query: null")
    assert load_dialect(path).interlock_query is None


def test_render_formats_numbers_as_nr3_and_channels_as_nr1(dialect: Dialect) -> None:
    assert dialect.render("set_voltage", volts=25.0) == "SOUR:VOLT 2.500000E+01"
    assert dialect.render("set_current_limit", amps=5e-4) == "SOUR:CURR:LIM 5.000000E-04"
    assert dialect.render("select_channel", channel=3) == "ROUT:CLOS (@3)"
    assert dialect.render("output", state="OFF") == "OUTP OFF"
    assert dialect.render("measure") == "READ?;:STAT:QUES:COND?;:SYST:ERR:COUN?"


def test_render_refuses_wrong_values(dialect: Dialect) -> None:
    with pytest.raises(DialectError, match="needs values for"):
        dialect.render("set_voltage", amps=1.0)
    with pytest.raises(DialectError, match="not a dialect operation"):
        dialect.render("measure_fields")
    with pytest.raises(TypeError):
        dialect.render("output", state=True)


def test_render_of_a_null_operation_says_so(dialect: Dialect) -> None:
    without = dataclasses.replace(dialect, interlock_query=None)
    with pytest.raises(DialectError, match="cannot do that operation"):
        without.render("interlock_query")
