"""Recipes and stations: valid files load to SI floats; each broken one says file:line: field."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.load import load_recipe, load_station
from sequencer.recipe.units import UnitProblem, parse_quantity

RECIPES = Path(__file__).resolve().parents[2] / "recipes"


def test_demo_recipe_loads_in_si_units():
    recipe = load_recipe(RECIPES / "demo.yaml")
    sweep, spot = recipe.steps
    assert (sweep.start_v, sweep.stop_v, sweep.points) == (0.0, 40.0, 81)
    assert sweep.compliance_a == pytest.approx(5e-3)
    assert spot.voltage_v == 25.0 and spot.repeats == 5
    assert recipe.judge.limit("regulated_current").min == pytest.approx(1.62e-3)
    assert recipe.station.channels == tuple(range(1, 21))
    assert recipe.station.limits.max_power_w == pytest.approx(0.25)
    assert len(recipe.digest) == 64


@pytest.mark.parametrize(
    ("text", "unit", "si"),
    [
        ("25 V", "voltage", 25.0),
        ("2 mA", "current", 2e-3),
        ("250 mW", "power", 0.25),
        ("20 ms", "time", 0.02),
        ("100 kohm", "resistance", 1e5),
        ("1.5 kV", "voltage", 1500.0),
        ("300 uA", "current", 3e-4),
        ("300 µA", "current", 3e-4),
    ],
)
def test_quantities(text, unit, si):
    assert parse_quantity(text, unit) == pytest.approx(si)


@pytest.mark.parametrize("bad", ["25", 25, "25 mA", "volts", None, True])
def test_voltage_quantity_refused(bad):
    with pytest.raises(UnitProblem):
        parse_quantity(bad, "voltage")


def _write(tmp_path: Path, recipe_text: str) -> Path:
    station = (RECIPES / "demo-station.yaml").read_text()
    (tmp_path / "demo-station.yaml").write_text(station)
    path = tmp_path / "r.yaml"
    path.write_text(recipe_text)
    return path


DEMO = (RECIPES / "demo.yaml").read_text()


def _line_of(text: str, needle: str) -> int:
    return next(n for n, line in enumerate(text.splitlines(), 1) if needle in line)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("old", "new", "field", "words"),
    [
        ("stop: 40 V", "stop: 40", "steps[0].sweep.stop", "needs a unit"),
        ("stop: 40 V", "stop: 40 mA", "steps[0].sweep.stop", "must be a voltage"),
        ("points: 81", "points: 1", "steps[0].sweep.points", "must be 2 to"),
        ("repeats: 5", "repeats: many", "steps[1].spot.repeats", "whole number"),
        ("knee_fraction: 0.8", "knee_fraction: 1.8", "judge.knee_fraction", "between 0 and 1"),
        ("settle: 5 ms", "setle: 5 ms", "steps[1].spot.setle", "not a known setting"),
        (
            "compliance: 5 mA\n      settle: 1 ms",
            "compliance: -5 mA\n      settle: 1 ms",
            "steps[0].sweep.compliance",
            "must be positive",
        ),
    ],
)
def test_broken_recipe_names_file_line_and_field(tmp_path, old, new, field, words):
    text = DEMO.replace(old, new, 1)
    assert text != DEMO
    path = _write(tmp_path, text)
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    message = str(info.value)
    assert message.startswith(f"{path}:{_line_of(text, new.split(chr(10))[0].split(':')[0])}: ")
    assert field in message and words in message
    assert "\n" not in message


@pytest.mark.robustness
def test_yaml_syntax_error_has_a_line(tmp_path):
    path = _write(tmp_path, DEMO.replace("lot: FK2611-07", "lot: [FK2611-07"))
    with pytest.raises(RecipeError, match=r"r\.yaml:\d+: is not valid YAML"):
        load_recipe(path)


@pytest.mark.robustness
def test_missing_station_file(tmp_path):
    path = tmp_path / "r.yaml"
    path.write_text(DEMO)
    with pytest.raises(RecipeError, match=r"demo-station\.yaml: file not found"):
        load_recipe(path)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("old", "new", "words"),
    [
        ("channels: 1-20", "channels: 20-1", "must be a count"),
        ("max_power: 250 mW", "max_power: 0 mW", "must be positive"),
        ("line_frequency: 50 Hz", "line_frequency: 55 Hz", "50 Hz or 60 Hz"),
        ("interlocked: true", "interlocked: maybe", "true or false"),
    ],
)
def test_broken_station(tmp_path, old, new, words):
    text = (RECIPES / "demo-station.yaml").read_text().replace(old, new)
    path = tmp_path / "s.yaml"
    path.write_text(text)
    with pytest.raises(RecipeError, match=words) as info:
        load_station(path)
    assert str(info.value).startswith(f"{path}:{_line_of(text, new)}: ")


# --- numbers as written: no expression, no comma, no YAML base or separator ----------------


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("old", "new", "field", "words"),
    [
        # red team 1 and 14: units were parsed as expressions (0*1e999 V gave NaN, 9**9**9 V hung)
        ("stop: 40 V", "stop: 0*1e999 V", "steps[0].sweep.stop", "not a calculation"),
        ("stop: 40 V", "stop: 9**9**9 V", "steps[0].sweep.stop", "not a calculation"),
        ("stop: 40 V", "stop: '+nan V'", "steps[0].sweep.stop", "must be a finite number"),
        ("stop: 40 V", "stop: 1e999 V", "steps[0].sweep.stop", "is too large a number"),
        ("voltage: 25 V", "voltage: '-inf V'", "steps[1].spot.voltage", "finite number"),
        # red team 2: a decimal comma read as a tenfold value
        ("stop: 40 V", "stop: 4,0 V", "steps[0].sweep.stop", "write 4.0 V: a decimal point"),
        ("compliance: 5 mA", "compliance: 1,8 mA", "steps[0].sweep.compliance", "write 1.8 mA"),
        # issue 19 item 11: 0.1 mohm was read as milliohm beside a 100 kOhm limit
        ("min: 100 kohm", "min: 0.1 mohm", "judge.limits.dynamic_impedance.min",
         "did you mean 'MOhm' (megaohm)?"),
        # YAML 1.1 numbers that are not what they look like
        ("points: 81", "points: 0x51", "steps[0].sweep.points", "reads as the number 81"),
        ("points: 81", "points: 1:21", "steps[0].sweep.points", "reads as the number 81"),
        ("points: 81", "points: 0121", "steps[0].sweep.points", "reads as the number 81"),
        ("nplc: 0.1", "nplc: .nan", "nplc", "reads as the number nan"),
        ("knee_fraction: 0.8", "knee_fraction: 0.8_0", "judge.knee_fraction", "written '0.8_0'"),
        ("lot: FK2611-07", "lot: 2611_07", "lot", "put it in quotes if it is text"),
    ],
)  # fmt: skip
def test_numbers_are_read_as_written_or_refused(tmp_path, old, new, field, words):
    text = DEMO.replace(old, new, 1)
    assert text != DEMO
    path = _write(tmp_path, text)
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    message = str(info.value)
    assert message.startswith(f"{path}:{_line_of(text, new)}: {field} "), message
    assert words in message and "\n" not in message


def test_practitioners_units_load_from_a_recipe(tmp_path):
    text = DEMO.replace("min: 100 kohm", "min: 0.1 MOhm").replace("min: 20 kohm", "min: 20 kΩ")
    text = text.replace("compliance: 5 mA", "compliance: 5000 µA", 1)
    recipe = load_recipe(_write(tmp_path, text))
    assert recipe.judge.limit("dynamic_impedance").min == pytest.approx(1e5)
    assert recipe.judge.limit("knee_impedance").min == pytest.approx(2e4)
    assert recipe.steps[0].compliance_a == pytest.approx(5e-3)
