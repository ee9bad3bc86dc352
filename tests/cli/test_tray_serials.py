"""A tray serial map given at run time (`--serials CSV`, `--first-serial SERIAL`): device names
that are the parts' serials, checked like scanned serials before anything is opened, recorded,
and kept by a resume."""

from __future__ import annotations

import csv
import io
import json

import pytest
from rich.console import Console

from sequencer.cli.main import main
from tests.store.conftest import write_recipe


def ccbench(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), console=Console(file=out, width=300, highlight=False))
    return code, out.getvalue()


def names(folder):
    with open(folder / "devices.csv", newline="") as f:
        return [(r["round"], r["device"]) for r in csv.DictReader(f)]


@pytest.fixture
def recipe(tmp_path):
    pattern = "part_by_part: {serial_pattern: 'FK2611-07-[0-9]{4}', serials: {case: upper}}\n"
    return write_recipe(tmp_path / "recipes", channels=3, points=21, extra=pattern)


@pytest.mark.sim
def test_a_serial_map_names_each_channels_part_and_is_recorded(tmp_path, recipe):
    tray = tmp_path / "tray.csv"
    tray.write_text(
        "channel,serial\n2,fk2611-07-0502\n1,FK2611-07-0501\n# empty socket? no\n3,FK2611-07-0503\n"
    )
    out = tmp_path / "run"
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--serials", str(tray))
    assert code == 0, text
    assert names(out) == [("1", "FK2611-07-0501"), ("1", "FK2611-07-0502"), ("1", "FK2611-07-0503")]
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["tray_serials"] == {
        "1": "FK2611-07-0501",
        "2": "FK2611-07-0502",
        "3": "FK2611-07-0503",
    }


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (
            "1,FK2611-07-0001\n2,FK2611-07-0002\n",
            "tray.csv: names no serial for channel 3; list every channel",
        ),
        (
            "1,FK2611-07-0001\n2;FK2611-07-0002\n3,FK2611-07-0003\n",
            "tray.csv:2: write 'channel,serial'",
        ),
        (
            "1,FK2611-07-0001\n2,FK2611-07-0001\n3,FK2611-07-0003\n",
            "serial 'FK2611-07-0001' is on channels 1 and 2",
        ),
        (
            "1,FK2611-07-0001\n1,FK2611-07-0002\n3,FK2611-07-0003\n",
            "tray.csv:2: channel 1 again (first at line 1)",
        ),
        (
            "1,FK2611-07-0001\n2,FK2611-07-0002\n3,FK2611-07-0003\n9,FK2611-07-0009\n",
            "tray.csv:4: channel 9 is not on the tray",
        ),
        (
            "1,FK2611-07-0001\n2,FK2611-08-0002\n3,FK2611-07-0003\n",
            "tray.csv:2: 'FK2611-08-0002' does not match this recipe's serials",
        ),
        (
            "1,FK2611-07-0001\n2,FK2611 07\n3,FK2611-07-0003\n",
            "tray.csv:2: 'FK2611 07' is not a serial",
        ),
    ],
)
def test_a_wrong_map_is_one_line_and_nothing_is_opened(tmp_path, recipe, content, message):
    tray = tmp_path / "tray.csv"
    tray.write_text(content)
    out = tmp_path / "run"
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--serials", str(tray))
    assert code == 2 and message in text, text
    assert not out.exists()  # refused before the folder, the caution or the instrument


def test_a_serial_with_a_space_is_refused_when_the_rule_keeps_spaces(tmp_path):
    recipe = write_recipe(tmp_path / "recipes", channels=2, points=21)
    tray = tmp_path / "tray.csv"
    tray.write_text("1,A 1\n2,A2\n")
    code, text = ccbench(
        "run", str(recipe), "--sim", "--out", str(tmp_path / "run"), "--serials", str(tray)
    )
    assert code == 2 and "tray.csv:1: 'A 1' is not a serial (one short code)" in text


@pytest.mark.sim
def test_first_serial_counts_up_keeping_its_width_and_a_resume_keeps_the_names(tmp_path, recipe):
    out = tmp_path / "run"
    code, text = ccbench(
        "run", str(recipe), "--sim", "--out", str(out), "--first-serial", "FK2611-07-0998"
    )
    assert code == 0, text
    first = [("1", "FK2611-07-0998"), ("1", "FK2611-07-0999"), ("1", "FK2611-07-1000")]
    assert names(out) == first
    code, text = ccbench(
        "run", str(recipe), "--sim", "--out", str(out), "--resume", "--rounds", "2"
    )
    assert code == 0, text
    assert names(out) == first + [(r.replace("1", "2", 1), d) for r, d in first]
    again = ("--resume", "--rounds", "3", "--first-serial", "FK2611-07-0001")
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), *again)
    assert code == 2 and "differs from the serials" in text


def test_first_serial_must_end_in_digits_and_not_outgrow_the_pattern(tmp_path, recipe):
    code, text = ccbench("run", str(recipe), "--sim", "--first-serial", "FK2611-07-ABCD")
    assert code == 2 and "does not match this recipe's serials" in text
    code, text = ccbench("run", str(recipe), "--sim", "--first-serial", "FK2611-07-9999")
    assert code == 2 and "'FK2611-07-10000' does not match" in text
    plain = write_recipe(tmp_path / "plain", channels=2, points=21)
    code, text = ccbench("run", str(plain), "--sim", "--first-serial", "LOT-A")
    assert code == 2 and "--first-serial must end in digits" in text


def test_a_tray_map_is_refused_part_by_part(tmp_path, recipe):
    code, text = ccbench(
        "run", str(recipe), "--sim", "--part-by-part", "--first-serial", "FK2611-07-0001"
    )
    assert code == 2 and "part by part, each part's serial is scanned" in text
