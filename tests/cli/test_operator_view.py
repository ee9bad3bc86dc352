"""The production screen (`--part-by-part --operator-view`) as an operator meets it through a
pipe at 80 columns: after each part what to do with it (PUT IT IN BIN n, RETEST ALLOWED (1 left),
DO NOT RETEST) in the panel's place, a refusal drawn as big as a verdict, a running count of
parts, passes and fails, serials written as the recipe says, and no plan or estimate lines."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.bench.prompts import Scanner
from sequencer.model.errors import RecipeError
from sequencer.recipe.load import load_recipe
from sequencer.recipe.serials import SerialRule
from tests.support.stations import write_recipe, write_station

ROOT = Path(__file__).resolve().parents[2]
BOX = "┏┃┗"
# A passing part in lower case, an open part, the first again in upper case (a duplicate), the
# open one again with spaces around it (its one retest), and once more (no retest left).
SCRIPT = (
    "fk2611-07-0001\nFK2611-07-0002\nFK2611-07-0001\n  fk2611-07-0002.  \nFK2611-07-0002\nquit\n"
)
SERIALS = "part_by_part: {retests: 1, serials: {case: upper, drop: '.'}}"


def session(tmp_path: Path, *flags: str, recipe_extra: str = SERIALS):
    station = write_station(tmp_path / "recipes", channels=6)
    fault = "clock: virtual, faults: [{kind: device-open, on: point, channel: 2}]}"
    station.write_text(station.read_text().replace("clock: virtual}", fault))
    recipe = write_recipe(tmp_path / "recipes", station, extra=recipe_extra)
    command = [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim"]
    command += ["--out", str(tmp_path / "run"), "--part-by-part", *flags]
    env = dict(os.environ, PYTHONPATH=str(ROOT), COLUMNS="80")
    return subprocess.run(
        command, input=SCRIPT, capture_output=True, text=True, timeout=120, cwd=ROOT, env=env
    )


def panels(screen: str) -> list[str]:
    """Each panel's text, in the order shown, with the line that follows it."""
    found, current = [], []
    lines = screen.splitlines()
    for k, line in enumerate(lines):
        if line.startswith("┏"):
            current = []
        current.append(line)
        if line.startswith("┗"):
            after = lines[k + 1] if k + 1 < len(lines) else ""
            found.append("\n".join([*current, after]))
    return found


@pytest.mark.sim
def test_each_part_ends_with_what_to_do_with_it(tmp_path):
    done = session(tmp_path, "--operator-view")
    assert done.returncode == 0, done.stdout + done.stderr
    screen = done.stdout
    shown = panels(screen)
    assert len(shown) == 5, screen
    assert "PUT IT IN BIN 1" in shown[0] and "FK2611-07-0001" in shown[0]
    assert "parts 1   passed 1   failed 0   tests 1" in shown[0]
    assert "RETEST ALLOWED (1 left)" in shown[1] and "reject it to bin 3" in shown[1]
    assert "parts 2   passed 1   failed 1   tests 2" in shown[1]
    assert "FK2611-07-0001: duplicate: passed already" in shown[2]  # upper case: the same part
    assert "DO NOT RETEST: set the part aside" in shown[2]
    assert "FK2611-07-0002   attempt 2" in shown[3]  # lower case, spaces and a dot: the same
    assert "DO NOT RETEST: reject it to bin 3" in shown[3]
    assert "parts 2   passed 1   failed 1   tests 3" in shown[3]
    assert "no retest left" in shown[4] and "DO NOT RETEST" in shown[4]
    for panel in shown:  # 80 columns, whatever the terminal
        assert max(len(line) for line in panel.splitlines()) <= 80, panel
    assert "estimated" not in screen and "predicted" not in screen  # no plan or estimate
    assert "devices x" not in screen
    assert "serials in upper case, without '.'" in screen
    assert screen.rstrip().splitlines()[-1].startswith("output off (read back from the instrument)")


@pytest.mark.sim
def test_without_the_operator_view_the_verdict_panels_stay(tmp_path):
    done = session(tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "RETEST ALLOWED" not in done.stdout and "PUT IT IN" not in done.stdout
    assert "not tested: FK2611-07-0001: duplicate" in done.stdout  # the plain line, as before
    assert "estimated" in done.stdout


@pytest.mark.robustness
def test_the_operator_view_needs_part_by_part(tmp_path):
    station = write_station(tmp_path / "recipes", channels=2)
    recipe = write_recipe(tmp_path / "recipes", station)
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim", "--operator-view",
         "--out", str(tmp_path / "run")],
        capture_output=True, text=True, timeout=60, cwd=ROOT,
        env=dict(os.environ, PYTHONPATH=str(ROOT)),
    )  # fmt: skip
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr.strip() == "ccbench: command line: --operator-view needs --part-by-part"
    assert not (tmp_path / "run").exists()


def test_a_serial_is_written_as_the_rule_says():
    rule = SerialRule("upper", " .")
    assert rule.apply("fk2611-07-0001.") == "FK2611-07-0001"
    assert SerialRule("lower").apply("FK2611-07-0001") == "fk2611-07-0001"
    assert SerialRule().apply("Fk2611-07-0001") == "Fk2611-07-0001"  # as scanned by default
    said: list[str] = []
    lines = iter(["\x02fk2611-07-0001\x03\n", ""])
    scanner = Scanner(lambda: next(lines), said.append, r"FK2611-07-[0-9]{4}", rule.apply)
    assert scanner.next_serial("scan") == "FK2611-07-0001"  # the pattern sees the written form


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("written", "words"),
    [
        ("{case: uper}", "part_by_part.serials.case must be one of as-scanned, upper, lower"),
        ("{cse: upper}", "did you mean 'case'?"),
        ("upper", "part_by_part.serials must be a mapping"),
    ],
)
def test_a_wrong_serial_rule_is_one_clear_line(tmp_path, written, words):
    station = write_station(tmp_path / "recipes", channels=2)
    recipe = write_recipe(tmp_path / "recipes", station,
                          extra=f"part_by_part: {{serials: {written}}}")  # fmt: skip
    with pytest.raises(RecipeError, match=words.replace("(", r"\(").replace("?", r"\?")):
        load_recipe(recipe)
