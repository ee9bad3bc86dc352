"""Hostile or broken files (red-team cases): each is refused with one line naming the file (and
the line where there is one), at once, and never with a traceback."""

from __future__ import annotations

import itertools
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe import yamlsource
from sequencer.recipe.load import load_recipe
from sequencer.recipe.yamlsource import parse_yaml

ROOT = Path(__file__).resolve().parents[2]
DEMO = (ROOT / "recipes" / "demo.yaml").read_text(encoding="utf-8")


def _recipe(tmp_path: Path, text: str | bytes) -> Path:
    station = (ROOT / "recipes" / "demo-station.yaml").read_text(encoding="utf-8")
    (tmp_path / "demo-station.yaml").write_text(station, encoding="utf-8")
    path = tmp_path / "r.yaml"
    path.write_bytes(text if isinstance(text, bytes) else text.encode())
    return path


def _alias_bomb(levels: int = 9) -> str:
    """Nine levels of nine aliases each: a few hundred bytes that expand to 9**9 values."""
    lines = ["a: &a [" + ",".join(["x"] * 9) + "]"]
    names = "abcdefghij"[:levels]
    for parent, child in itertools.pairwise(names):
        lines.append(f"{child}: &{child} [" + ",".join(["*" + parent] * 9) + "]")
    return "\n".join(lines) + "\n"


def test_an_alias_bomb_is_refused_by_its_size():
    with pytest.raises(RecipeError, match="holds more than 20000 values") as err:
        parse_yaml(_alias_bomb(), "bomb.yaml")
    assert err.value.line is not None


def test_aliases_a_recipe_may_use_still_work():
    source = parse_yaml("base: &b {x: 1}\nother: *b\n", "ok.yaml")
    assert source.data == {"base": {"x": 1}, "other": {"x": 1}}


def test_a_file_above_the_size_bound_is_refused_unread(tmp_path):
    path = _recipe(tmp_path, DEMO + "#" * (yamlsource.MAX_BYTES + 10) + "\n")
    with pytest.raises(RecipeError, match="larger than 1024 kB"):
        load_recipe(path)


def test_a_byte_that_is_not_utf8_names_its_line(tmp_path):
    path = _recipe(tmp_path, DEMO.encode() + b"# 5 \xb5A\n")
    with pytest.raises(RecipeError, match=r"not UTF-8 text \(byte 0xb5\)") as err:
        load_recipe(path)
    assert err.value.line == DEMO.count("\n") + 1


@pytest.mark.parametrize("tag", ["!foo bar", "!!python/name:os.system ''"])
def test_a_yaml_tag_is_refused_at_its_line(tag):
    with pytest.raises(RecipeError, match="YAML tag") as err:
        parse_yaml(f"a: 1\nb: {tag}\n", "t.yaml")
    assert err.value.line == 2


@pytest.mark.parametrize("depth", [yamlsource.MAX_DEPTH + 5, 10_000])
def test_deep_nesting_is_refused(depth):
    with pytest.raises(RecipeError, match="nests deeper than"):
        parse_yaml("deep: " + "[" * depth + "]" * depth + "\n", "d.yaml")


def test_a_long_name_is_refused(tmp_path):
    text = DEMO.replace("lot: FK2611-07", "lot: " + "x" * 600)
    with pytest.raises(RecipeError, match="lot is longer than 500 characters"):
        load_recipe(_recipe(tmp_path, text))


def test_a_tiny_step_is_refused_before_any_array_is_made(tmp_path):
    text = DEMO.replace("      points: 81", "      step: 1e-9 V")
    with pytest.raises(RecipeError, match="at most 100000"):
        load_recipe(_recipe(tmp_path, text))


def test_a_billion_channels_are_refused(tmp_path):
    station = (ROOT / "recipes" / "demo-station.yaml").read_text(encoding="utf-8")
    assert "channels: 1-20" in station
    path = _recipe(tmp_path, DEMO)
    (tmp_path / "demo-station.yaml").write_text(station.replace("1-20", "1-1000000000"))
    with pytest.raises(RecipeError, match="at most 10000"):
        load_recipe(path)


def test_the_recipe_is_read_once_and_recorded_as_parsed(tmp_path, monkeypatch):
    path = _recipe(tmp_path, DEMO)

    def no_second_read(self, *args, **kwargs):  # an edit saved between two reads would
        raise AssertionError(f"{self} read again")  # record a text that did not run

    monkeypatch.setattr(Path, "read_text", no_second_read)
    recipe = load_recipe(path)
    assert recipe.text == DEMO


def test_a_station_naming_another_file_does_not_echo_it(tmp_path):
    other = tmp_path / "notes.txt"
    other.write_text("root:x:0:0:root:/root:/bin/bash\n" * 50)
    path = _recipe(tmp_path, DEMO.replace("station: demo-station.yaml", f"station: {other}"))
    run = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "check", str(path)],
        capture_output=True,
        text=True,
        timeout=60,
    )
    said = run.stdout + run.stderr
    assert run.returncode == 2 and "Traceback" not in said
    assert len(said) < 300  # one line, the file quoted only in part
    assert "root:x:0" in said  # as written: no ':x:' read as an emoji code


@pytest.mark.parametrize(
    ("old", "new", "said"),
    [
        ("      compliance: 5 mA\n      settle: 1 ms", "      complance: 5 mA\n      settle: 1 ms",
         "16: steps[0].sweep.complance is not a known setting; did you mean 'compliance'?"),
        ("nplc: 0.1", "nplcc: 0.1", "8: nplcc is not a known setting; did you mean 'nplc'?"),
        ("nplc: 0.1", "NPLC: 0.1", "8: NPLC is not a known setting; did you mean 'nplc'?"),
    ],
)  # fmt: skip
def test_an_unknown_key_is_named_at_its_own_line_with_the_nearest_known(tmp_path, old, new, said):
    assert old in DEMO
    with pytest.raises(RecipeError) as err:
        load_recipe(_recipe(tmp_path, DEMO.replace(old, new, 1)))
    assert str(err.value) == f"{tmp_path / 'r.yaml'}:{said}"


@pytest.mark.parametrize("written", ["yes", "on", "No", "OFF"])
def test_a_boolean_is_echoed_as_written(written):
    with pytest.raises(RecipeError) as err:
        parse_yaml(f"a: 1\nlists: {written}\n", "b.yaml")
    assert err.value.line == 2 and f"(written {written!r})" in str(err.value)
    assert parse_yaml("lists: true\nx: False\n", "b.yaml").data == {"lists": True, "x": False}
