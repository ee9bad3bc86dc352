"""`ccbench check` and the dialect keys a station needs: a real process, its exit code and its
one line naming the dialect file, line and key."""

from __future__ import annotations

from pathlib import Path

import pytest

from instruments.dialect import parse_dialect
from instruments.errors import DialectError
from tests.cli.test_cli_check import ccbench
from tests.instruments.test_dialect_files import PACKAGED
from tests.support.stations import write_recipe, write_station

SWITCH = 'select_channel: "ROUT:CLOS (@{channel})"'


def _station_with_dialect(tmp_path: Path, dialect_text: str, channels: int) -> Path:
    dialect = tmp_path / "no-switch.yaml"
    dialect.write_text(dialect_text)
    station = write_station(tmp_path, channels=channels)
    text = station.read_text().replace(
        "instrument: {resource: sim, timeout: 5 s}",
        f"instrument: {{resource: sim, timeout: 5 s, dialect: {dialect}}}",
    )
    assert text != station.read_text()
    station.write_text(text)
    return write_recipe(tmp_path, station)


@pytest.mark.robustness
def test_a_null_switch_command_with_several_channels_is_refused_at_check(tmp_path: Path) -> None:
    text = PACKAGED.read_text().replace(SWITCH, "select_channel: null")
    recipe = _station_with_dialect(tmp_path, text, channels=6)
    done = ccbench("check", str(recipe))
    assert done.returncode == 2, done.stdout + done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and not done.stdout, done.stdout + done.stderr
    line = text.splitlines().index("select_channel: null") + 1
    assert lines[0].startswith(f"ccbench: {tmp_path / 'no-switch.yaml'}:{line}: select_channel")


def test_a_null_switch_command_is_fine_for_one_device_on_the_terminals(tmp_path: Path) -> None:
    text = PACKAGED.read_text().replace(SWITCH, "select_channel: null")
    recipe = _station_with_dialect(tmp_path, text, channels=1)
    done = ccbench("check", str(recipe))
    assert done.returncode == 0, done.stdout + done.stderr


def test_the_output_read_back_may_not_be_null() -> None:
    text = PACKAGED.read_text().replace('output_query: "OUTP?"', "output_query: null")
    with pytest.raises(DialectError) as caught:
        parse_dialect(text, "d.yaml")
    line = next(n for n, t in enumerate(text.splitlines(), 1) if t.startswith("output_query"))
    assert str(caught.value).startswith(f"d.yaml:{line}: key 'output_query': must not be null")


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ("read_termination: null", "read_termination: NL", "read_termination"),
        ("binary_bits: null", "binary_bits: 16", "binary_bits"),
        ('fetch: "FETC?"', 'fetch: "FETC? {volts}"', "fetch"),
    ],
)
def test_a_bad_link_key_is_one_line_from_check(
    tmp_path: Path, old: str, new: str, key: str
) -> None:
    text = PACKAGED.read_text()
    assert old in text
    text = text.replace(old, new)
    recipe = _station_with_dialect(tmp_path, text, channels=1)
    done = ccbench("check", str(recipe))
    assert done.returncode == 2, done.stdout + done.stderr
    lines = done.stderr.strip().splitlines()  # not a terminal: the error goes to stderr
    line = next(n for n, t in enumerate(text.splitlines(), 1) if t.startswith(f"{key}:"))
    assert len(lines) == 1 and not done.stdout, done.stdout + done.stderr
    assert f"{tmp_path / 'no-switch.yaml'}:{line}: key '{key}'" in lines[0]
