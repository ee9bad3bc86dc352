"""The station's `chamber:` entry and the recipe's `temperatures:`: values and one-line errors
that name file, line and field."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.load import load_recipe, load_station
from sequencer.recipe.temperatures import DEFAULT_BAND_K, DEFAULT_SOAK_S
from tests.support.stations import write_recipe, write_station

CHAMBER = """\
chamber:
  resource: sim
  lowest: -40 degC
  highest: 125 degC
  rate: 5 K/min
  safe: {safe}
  simulator: {{speed: 600}}
"""
TEMPERATURES = """\
temperatures:
  - 25 degC
  - {set: 85 degC, band: 1 K, for: 10 min, timeout: 45 min}
  - {set: 253.15 K}
"""


def files(tmp_path: Path, *, safe: str = "25 degC", temps: str = TEMPERATURES) -> Path:
    station = write_station(tmp_path, extra=CHAMBER.format(safe=safe))
    return write_recipe(tmp_path, station, extra=temps)


def test_station_chamber_and_recipe_set_points(tmp_path):
    recipe = load_recipe(files(tmp_path))
    chamber = recipe.station.chamber
    assert chamber is not None and chamber.resource == "sim" and chamber.dialect == "chamber_text"
    assert (chamber.lowest_c, chamber.highest_c, chamber.safe_c) == (-40.0, 125.0, 25.0)
    assert chamber.rate_k_per_s == pytest.approx(5 / 60)
    assert chamber.simulator_options == {"speed": 600}
    first, hot, cold = recipe.temperatures
    assert (first.celsius, first.band_k, first.soak_s) == (25.0, DEFAULT_BAND_K, DEFAULT_SOAK_S)
    assert (hot.celsius, hot.band_k, hot.soak_s, hot.timeout_s) == (85.0, 1.0, 600.0, 2700.0)
    assert cold.celsius == -20.0


def test_safe_off_stops_the_chamber(tmp_path):
    # quoted: a bare off is a YAML boolean, refused as written
    assert load_recipe(files(tmp_path, safe="'off'")).station.chamber.safe_c is None


def line_of(path: Path, text: str) -> int:
    return next(i for i, line in enumerate(path.read_text().splitlines(), 1) if text in line)


@pytest.mark.parametrize(
    ("old", "new", "field", "says"),
    [
        ("- 25 degC", "- 25", "temperatures[0]", "with a unit"),
        ("band: 1 K", "band: 1 degC", "temperatures[1].band", "in K"),
        ("timeout: 45 min", "timeout: 5 min", "temperatures[1].timeout", "longer than the soak"),
        ("for: 10 min", "soak: 10 min", "temperatures[1].soak", "not a known setting"),
    ],
)
def test_recipe_errors_name_line_and_field(tmp_path, old, new, field, says):
    path = files(tmp_path, temps=TEMPERATURES.replace(old, new))
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    message = str(info.value)
    assert message.startswith(f"{path}:{line_of(path, new)}: {field}") and says in message


@pytest.mark.parametrize(
    ("old", "new", "field", "says"),
    [
        ("safe: 25 degC", "safe: 150 degC", "chamber.safe", "within lowest..highest"),
        ("rate: 5 K/min", "rate: 5 degC/min", "chamber.rate", "K/s, K/min, K/h"),
        ("highest: 125 degC", "highest: -50 degC", "chamber.highest", "above lowest"),
    ],
)
def test_station_errors_name_line_and_field(tmp_path, old, new, field, says):
    files(tmp_path)
    station = tmp_path / "FLC-bench-P1.yaml"
    station.write_text(station.read_text().replace(old, new))
    with pytest.raises(RecipeError) as info:
        load_station(station)
    message = str(info.value)
    assert message.startswith(f"{station}:{line_of(station, new)}: {field}") and says in message


def test_tempco_limits_in_percent_per_kelvin(tmp_path):
    recipe = load_recipe(files(tmp_path, temps=TEMPERATURES + "tempco: {min: -0.05 %/K}\n"))
    assert recipe.tempco.min_pct_per_k == -0.05 and recipe.tempco.max_pct_per_k is None
    path = files(tmp_path, temps=TEMPERATURES + "tempco: {max: 0.05}\n")
    with pytest.raises(RecipeError, match=r"tempco.max must be in %/K"):
        load_recipe(path)
