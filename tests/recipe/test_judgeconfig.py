"""The recipe's `judge:` section and the station's `accuracy:` section: what they load to, and
one clear `file:line: field problem` message for each broken value."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.load import load_recipe, load_station

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
DEMO = (RECIPES / "demo.yaml").read_text()
STATION = (RECIPES / "demo-station.yaml").read_text()


def test_demo_judge_section_loads():
    s = load_recipe(RECIPES / "demo.yaml").judge
    assert (s.decision, s.coverage_factor, s.knee_of) == ("guarded", 2.0, "measured")
    assert (s.slope_window_v, s.knee_window, s.peak_voltage_v) == (4.0, 2.0, 40.0)
    assert s.reverse_voltage_v is None
    assert s.shape.drop_limit == 0.02 and s.shape.open_below_a == pytest.approx(1e-6)
    assert [b.number for b in s.bins] == [1, 1, 1, 2, 3, 4, 9, 5]
    assert s.bins[0].verdicts == ("pass",)  # a pass bin takes passing devices only
    assert s.bins[1].ranges[0].min == pytest.approx(1.74e-3)
    assert s.bins[-1].catch_all
    assert s.limit("peak_dissipation").max == pytest.approx(0.1)


def _load(tmp_path: Path, text: str, station: str = STATION):
    (tmp_path / "demo-station.yaml").write_text(station)
    path = tmp_path / "r.yaml"
    path.write_text(text)
    return path, lambda: load_recipe(path)


def _line_of(text: str, needle: str) -> int:
    return next(n for n, line in enumerate(text.splitlines(), 1) if needle in line)


BROKEN = [
    ("decision: guarded", "decision: strict", "judge.decision", "must be one of simple, guarded"),
    ("coverage_factor: 2", "coverage_factor: 5", "judge.coverage_factor", "must be 1 to 3"),
    (
        "coverage_factor: 2",
        "coverage_probability: 1.5",
        "judge.coverage_probability",
        "must be 0.5 to 0.999",
    ),
    ("knee_of: measured ", "knee_of: nominal ", "judge.knee_of", "must be one of"),
    ("peak_voltage: 40 V", "peak_voltage: -40 V", "judge.peak_voltage", "must be positive"),
    ("# reverse_voltage: -5 V", "reverse_voltage: 5 V", "judge.reverse_voltage", "negative"),
    ("knee_window: 2 V", "knee_window: 0 V", "judge.knee_window", "must be positive"),
    ("slope_window: 4 V", "slope_window: 4", "judge.slope_window", "needs a unit"),
    ("drop_limit: 0.02", "drop_limit: 2", "judge.shape.drop_limit", "between 0 and 1"),
    ("scatter_limit: 0.01", "scatter_limit: 1 %", "judge.shape.scatter_limit", "plain number"),
    ("open_below: 1 uA", "open_below: 1 V", "judge.shape.open_below", "must be a current"),
    (
        "peak_dissipation: {max: 100 mW}",
        "peak_dissipation: {max: 100 mA}",
        "judge.limits.peak_dissipation.max",
        "must be a power",
    ),
    (
        "knee_window: 2 V ",
        "knee_current: 1.25 mA ",
        "judge.knee_current",
        "replaces knee_fraction and knee_of",
    ),
    (
        "- {bin: 5, class: fail}",
        "- {bin: 5, class: fail, verdict: fail}",
        "judge.bins[7]",
        "must be a catch-all",
    ),
    (
        "{bin: 2, class: fail, name: guard band",
        "{bin: 1, class: fail, name: guard band",
        "judge.bins[3].class",
        "differs from an earlier bin 1",
    ),
    (
        "classification: [open, short]}",
        "classification: [open, shorted]}",
        "judge.bins[4].classification",
        "must be one of",
    ),
    (
        "{bin: 1, class: pass, name: IP-A,",
        "{bin: 1, class: pass, verdict: fail, name: IP-A,",
        "judge.bins[0].verdict",
        "may only be pass or guard-band",
    ),
    (
        "{bin: 9, class: fail, name: aborted, verdict: aborted}",
        "{bin: 9, klass: fail}",
        "judge.bins[6].klass",
        "is not a known setting",
    ),
    ("{bin: 4, class: fail,", "{bin: -4, class: fail,", "judge.bins[5].bin", "0 to 32767"),
    (
        "regulated_current: {min: 1.62 mA, max: 1.74 mA}",
        "regulated_current: {min: 1.74 mA, max: 1.62 mA}",
        "judge.bins[0].regulated_current.max",
        "must exceed min",
    ),
]


@pytest.mark.robustness
@pytest.mark.parametrize(("old", "new", "field", "words"), BROKEN)
def test_broken_judge_section_names_file_line_and_field(tmp_path, old, new, field, words):
    text = DEMO.replace(old, new, 1)
    assert text != DEMO
    path, load = _load(tmp_path, text)
    with pytest.raises(RecipeError) as info:
        load()
    message = str(info.value)
    assert message.startswith(f"{path}:{_line_of(text, new.strip())}: "), message
    assert field in message and words in message
    assert "\n" not in message


@pytest.mark.robustness
def test_knee_of_minimum_needs_a_min_limit(tmp_path):
    text = DEMO.replace("knee_of: measured ", "knee_of: minimum ").replace(
        "regulated_current: {min: 1.62 mA, max: 1.98 mA}", "regulated_current: {max: 1.98 mA}"
    )
    _, load = _load(tmp_path, text)
    with pytest.raises(RecipeError, match=r"judge\.knee_of 'minimum' needs limits"):
        load()


STATION_BROKEN = [
    ("gain: 0.05 %, offset: 2.5 nA", "gain: 0.05, offset: 2.5 nA", "accuracy.current[0].gain"),
    ("{range: 100 uA,", "{range: 1 uA,", "accuracy.current[1].range"),
    ("offset: 2 mV}", "offset: 2 mA}", "accuracy.voltage[1].offset"),
    ("gain: 0.02 %, offset: 0.2 mV", "gain: 20 %, offset: 0.2 mV", "accuracy.voltage[0].gain"),
    # float() read these as 0.05 % and as nan (then refused only by luck of the range check)
    ("gain: 0.05 %, offset: 2.5 nA", "gain: 0.0_5 %, offset: 2.5 nA", "accuracy.current[0].gain"),
    ("gain: 0.05 %, offset: 2.5 nA", "gain: nan %, offset: 2.5 nA", "accuracy.current[0].gain"),
    ("  voltage:\n", "  volts:\n", "accuracy.volts"),
]


@pytest.mark.robustness
@pytest.mark.parametrize(("old", "new", "field"), STATION_BROKEN)
def test_broken_accuracy_section(tmp_path, old, new, field):
    text = STATION.replace(old, new, 1)
    assert text != STATION
    path = tmp_path / "s.yaml"
    path.write_text(text)
    with pytest.raises(RecipeError) as info:
        load_station(path)
    assert str(info.value).startswith(f"{path}:{_line_of(text, new.strip())}: ")
    assert field in str(info.value)


@pytest.mark.robustness
def test_a_decimal_comma_in_an_accuracy_fraction_says_what_to_write(tmp_path):
    path = tmp_path / "s.yaml"
    comma = "gain: '0,05 %', offset: 2.5 nA"
    path.write_text(STATION.replace("gain: 0.05 %, offset: 2.5 nA", comma, 1))
    with pytest.raises(RecipeError, match=r"gain has a decimal comma: write 0\.05: a decimal"):
        load_station(path)


def test_station_without_accuracy_uses_the_defaults(tmp_path):
    from sequencer.model.accuracy import DEFAULT_ACCURACY

    text = STATION[: STATION.index("# What the SMU measures to")]
    path = tmp_path / "s.yaml"
    path.write_text(text)
    assert load_station(path).accuracy == DEFAULT_ACCURACY
