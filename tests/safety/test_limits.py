"""Three layers of limits: the recipe's own section cannot raise the station's, the device
ratings tighten them, and `ccbench check` shows the effective one and who set it."""

from __future__ import annotations

import dataclasses
import math

import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.model.errors import RecipeError
from sequencer.recipe.limits import Bound, Limits, Ratings, RecipeLimits, effective_limits
from sequencer.recipe.load import load_recipe
from tests.safety.bench import write_bench


def run_main(*argv: str) -> tuple[int, str]:
    console = Console(record=True, width=200, highlight=False)
    code = main(list(argv), console=console)
    return code, console.export_text()


def line_of(path, text: str) -> int:
    return next(n for n, line in enumerate(path.read_text().splitlines(), 1) if text in line)


def test_effective_limit_is_the_smallest_layer_and_names_it():
    station = Limits(100.0, 0.02, 0.5)
    lim = effective_limits(
        station,
        RecipeLimits(max_voltage_v=80.0, max_power_w=0.3),
        Ratings(peak_operating_voltage_v=60.0, max_dissipation_w=0.2, worst_case_current_a=3e-3),
    )
    assert lim.voltage == Bound(60.0, "peak operating voltage")
    assert lim.current == Bound(0.02, "station")
    assert lim.power == Bound(0.3, "recipe")
    assert lim.dissipation == Bound(0.2, "dissipation")
    # the device draws at most its worst case, whatever the compliance allows
    assert lim.device_power_w(50.0, 0.01) == pytest.approx(50.0 * 3e-3)
    assert effective_limits(station).voltage == Bound(100.0, "station")


def test_recipe_limits_and_ratings_are_read_with_units(tmp_path):
    path = write_bench(
        tmp_path,
        recipe={
            "limits": {"max_voltage": "45 V", "max_current": "10 mA", "max_power": "100 mW"},
            "ratings": {"peak_operating_voltage": "40 V", "max_dissipation": "600 mW",
                        "worst_case_current": "2.2 mA"},
            "on_trip": "skip",
        },
    )  # fmt: skip
    recipe = load_recipe(path)
    assert recipe.limits == RecipeLimits(45.0, 0.01, 0.1)
    assert recipe.ratings == Ratings(40.0, 0.6, pytest.approx(2.2e-3))
    assert recipe.on_trip == "skip"
    assert recipe.effective_limits.voltage == Bound(40.0, "peak operating voltage")


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("key", "value", "words"),
    [
        ("max_voltage", "61 V", "must be at most 60 V, the station's limit (got 61 V)"),
        ("max_current", "25 mA", "must be at most 20 mA, the station's limit (got 25 mA)"),
        ("max_power", "1 W", "must be at most 250 mW, the station's limit (got 1 W)"),
    ],
)
def test_a_recipe_cannot_raise_a_station_limit(tmp_path, key, value, words):
    path = write_bench(tmp_path, recipe={"limits": {key: value}})
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    assert str(info.value) == f"{path}:{line_of(path, key)}: limits.{key} {words}; " + (
        "a recipe can lower a station limit, never raise it"
    )
    assert info.value.exit_code == 3
    code, text = run_main("check", str(path))
    assert code == 3
    assert text.strip().splitlines() == [f"ccbench: {info.value}"]


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("recipe", "field", "words"),
    [
        ({"ratings": {"max_dissipation": "600"}}, "ratings.max_dissipation", "needs a unit"),
        ({"ratings": {"peak_voltage": "40 V"}}, "ratings.peak_voltage", "is not a known"),
        ({"limits": {"max_voltage": "-5 V"}}, "limits.max_voltage", "must be positive"),
        ({"on_trip": "continue"}, "on_trip", "must be 'stop' or 'skip'"),
        ({"hazardous_voltage": "yes"}, "hazardous_voltage", "must be 'acknowledged'"),
    ],
)
def test_bad_safety_keys_name_file_line_and_field(tmp_path, recipe, field, words):
    path = write_bench(tmp_path, recipe=recipe)
    with pytest.raises(RecipeError, match=f"{field} {words}") as info:
        load_recipe(path)
    assert info.value.line == line_of(path, field.split(".")[-1] + ":")
    assert info.value.exit_code == 2


@pytest.mark.robustness
def test_step_on_compliance_policy_is_checked(tmp_path):
    steps = [{"spot": {"voltage": "5 V", "compliance": "1 mA", "on_compliance": "stop"}}]
    path = write_bench(tmp_path, recipe={"steps": steps})
    with pytest.raises(RecipeError, match=r"steps\[0\].spot.on_compliance must be 'flag' or"):
        load_recipe(path)


def test_check_shows_the_effective_limits_and_who_set_them(tmp_path):
    path = write_bench(
        tmp_path,
        recipe={"limits": {"max_power": "200 mW"},
                "ratings": {"peak_operating_voltage": "35 V", "max_dissipation": "150 mW"}},
    )  # fmt: skip
    code, text = run_main("check", str(path))
    assert code == 0, text
    rows = {line.split("│")[1].strip(): line for line in text.splitlines() if "│" in line}
    assert "35 V" in rows["voltage"] and "ratings (POV)" in rows["voltage"]
    assert "20 mA" in rows["compliance"] and "station" in rows["compliance"]
    assert "200 mW" in rows["V x compliance"] and "recipe" in rows["V x compliance"]
    # 30 V x 5 mA = 150 mW: the plan peak sits exactly on the rated dissipation
    assert "150 mW" in rows["dissipation"] and "ratings (PD)" in rows["dissipation"]


# --- the station's own limits: finite, positive, under a ceiling; a sane touch-safe voltage ---


def station_with(tmp_path, **limits: str):
    from tests.safety.bench import STATION

    return write_bench(tmp_path, station={"limits": {**STATION["limits"], **limits}})


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("limits", "field", "words"),
    [
        # red team 10: no ceiling (1e999 V was infinity, shown "∞ V")
        ({"max_voltage": "1e9 V"}, "max_voltage", "must be at most 1 kV, the most ccbench drives"),
        ({"max_voltage": "1001 V"}, "max_voltage", "must be at most 1 kV"),
        ({"max_current": "11 A"}, "max_current", "must be at most 10 A"),
        ({"max_power": "1.5 kW"}, "max_power", "must be at most 1 kW"),
        ({"max_voltage": "1e999 V"}, "max_voltage", "is too large a number"),
        ({"max_power": "+inf W"}, "max_power", "must be a finite number"),
        ({"max_current": "nan A"}, "max_current", "must be a finite number"),
        # red team 2: a station written 60,0 V was a 600 V station
        ({"max_voltage": "60,0 V"}, "max_voltage", "write 60.0 V: a decimal point, not a comma"),
        # red team 9 and issue 19 item 11: a touch-safe voltage that switches the rules off
        ({"touch_safe_voltage": "1e9 V"}, "touch_safe_voltage", "must not exceed max_voltage"),
        ({"touch_safe_voltage": "100 V"}, "touch_safe_voltage",
         "must not exceed max_voltage (60 V; got 100 V)"),
        ({"max_voltage": "200 V", "max_power": "1 W", "touch_safe_voltage": "100 V"},
         "touch_safe_voltage", "must be at most 70 V, the d.c. level above which IEC 61010-1"),
        ({"max_voltage": "200 V", "touch_safe_voltage": "100 V", "touch_safe_reason": " "},
         "touch_safe_voltage", "say why in 'touch_safe_reason:'"),
    ],
)  # fmt: skip
def test_station_limits_are_sane_or_refused_with_file_and_line(tmp_path, limits, field, words):
    path = station_with(tmp_path, **limits)
    station = path.parent / "station.yaml"
    with pytest.raises(RecipeError) as info:
        load_recipe(path)
    assert str(info.value).startswith(f"{station}:{line_of(station, field + ':')}: limits.{field} ")
    assert words in str(info.value)
    code, text = run_main("check", str(path))
    assert code == 2 and text.strip().splitlines() == [f"ccbench: {info.value}"]


def test_a_touch_safe_voltage_above_70_v_needs_a_stated_reason(tmp_path):
    reason = "fixture fully enclosed, terminals unreachable with the lid open or closed"
    path = station_with(tmp_path, max_voltage="200 V", touch_safe_voltage="100 V",
                        touch_safe_reason=reason)  # fmt: skip
    station = load_recipe(path).station
    assert station.limits.touch_safe_v == 100.0 and station.limits.touch_safe_reason == reason
    code, text = run_main("check", str(path))
    assert code == 0 and f"station: {reason}" in text


def test_an_unwritten_touch_safe_voltage_is_42_v_or_the_station_maximum(tmp_path):
    from tests.safety.bench import STATION

    low = {"max_voltage": "30 V", "max_current": "20 mA", "max_power": "250 mW"}
    path = write_bench(tmp_path / "low", station={"limits": low})
    assert load_recipe(path).station.limits.touch_safe_v == 30.0
    path = write_bench(tmp_path / "usual", station={"limits": STATION["limits"]})
    assert load_recipe(path).station.limits.touch_safe_v == 42.0


@pytest.mark.robustness
@pytest.mark.parametrize(
    "values",
    [(math.inf, 0.02, 0.5), (60.0, math.nan, 0.5), (60.0, 0.02, 1e9), (2000.0, 0.02, 0.5),
     (60.0, 0.02, 0.5, math.nan), (60.0, 0.02, 0.5, 1e9)],
)  # fmt: skip
def test_limits_built_in_code_are_checked_too(values):
    with pytest.raises(ValueError):
        Limits(*values)


@pytest.mark.robustness
def test_non_finite_effective_limits_are_refused():
    lim = effective_limits(Limits(60.0, 0.02, 0.5))
    with pytest.raises(ValueError, match="finite and positive"):
        dataclasses.replace(lim, voltage=Bound(math.nan, "station"))
    with pytest.raises(ValueError, match="finite and positive"):
        dataclasses.replace(lim, touch_safe_v=math.inf)
