"""The station's results_database key and the verdict's big letters, as a user meets them."""

from __future__ import annotations

import io

import pytest
from rich.console import Console

from sequencer.cli.verdictview import block_letters, verdict_panel, verdict_style
from sequencer.judge.engine import MISSING, Judgement
from sequencer.model.errors import RecipeError
from sequencer.model.judgesettings import FIGURES
from sequencer.recipe.load import load_station
from tests.support.stations import write_station

URL = "postgresql://ccbench@results.example.internal:5433/ccbench"


@pytest.mark.parametrize(
    ("value", "problem"),
    [
        ("mysql://ccbench@db/ccbench", "7: results_database must be a postgresql:// URL"),
        ("postgresql://ccbench:secret@db/ccbench", "7: results_database must not carry a password"),
        ("postgresql://ccbench@db/x?password=s2", "7: results_database must not carry a password"),
        ("postgres://a@db/x?sslmode=require&Password=s", "7: results_database must not carry a"),
        ("postgresql://a@db/x?sslpassword=s", "7: results_database must not carry a password"),
        ("postgresql://ccbench@db", "7: results_database must name the database"),
        ("postgresql://ccbench@db:port/x", "7: results_database is not a URL"),
        ("{url: 'postgres://a@db/x', wait_at_end: 2 h}", "9: results_database.wait_at_end must be"),
        ("{url: 'postgres://a@db/x', wait: 2 s}", "9: results_database.wait is not a known"),
    ],
)
def test_a_wrong_results_database_names_file_line_and_field(tmp_path, value, problem):
    extra = f"results_database: {value}\n"
    if value.startswith("{"):  # the mapping form, one key a line
        extra = "results_database:\n  " + value[1:-1].replace(", ", "\n  ") + "\n"
    path = write_station(tmp_path, extra=extra)
    with pytest.raises(RecipeError) as caught:
        load_station(path)
    assert str(caught.value).startswith(f"{path}:{problem}")


def test_the_results_database_is_read_and_shown_without_the_user(tmp_path):
    station = load_station(write_station(tmp_path, extra=f"results_database: {URL}\n"))
    assert station.results_database is not None
    assert (station.results_database.url, station.results_database.wait_at_end_s) == (URL, 15.0)
    assert station.results_database.shown == "results.example.internal:5433/ccbench"
    mapping = f"results_database:\n  url: {URL}\n  wait_at_end: 500 ms\n"
    station = load_station(write_station(tmp_path, extra=mapping))
    assert station.results_database is not None and station.results_database.wait_at_end_s == 0.5
    assert load_station(write_station(tmp_path)).results_database is None


def test_the_verdict_in_block_letters_with_its_bin():
    judgement = Judgement(
        "FK2611-07-0042", dict.fromkeys(FIGURES, MISSING), "ok", hard_bin=1, bin_class="pass",
        soft_bin="IP-B",
    )  # fmt: skip
    out = io.StringIO()
    Console(file=out, width=60, color_system=None).print(verdict_panel(judgement, 2))
    lines = out.getvalue().splitlines()
    assert lines[2].strip("┃ ") == "████   ███   ████  ████"  # P A S S, five rows high
    assert [line.strip("┃ ") for line in lines[2:7]] == [r.rstrip() for r in block_letters("PASS")]
    assert lines[8].strip("┃ ") == "████  ███ █   █      █"  # B I N 1
    assert lines[13].strip("┃ ") == "FK2611-07-0042   attempt 2   bin 1 (IP-B)"
    assert verdict_style(judgement) == "bold white on green"
    failed = Judgement("x", judgement.figures, "open", ("open: no current",), (), 3, "fail", "")
    assert verdict_style(failed) == "bold white on red"
    assert verdict_style(Judgement("x", judgement.figures, "aborted")) == "bold black on yellow"
