"""Stations with several instruments: the `instruments:` list, its checks, and `ccbench run`
on four simulated SMUs at once giving what one gives."""

from __future__ import annotations

import csv
import re
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.load import load_recipe, load_station
from tests.support.lots import ROOT

DEMO_STATION = (ROOT / "recipes" / "demo-station.yaml").read_text()


def station_text(instruments: str, *, virtual: bool = False) -> str:
    start, end = DEMO_STATION.index("instrument:"), DEMO_STATION.index("limits:")
    text = DEMO_STATION[:start] + instruments + "\n" + DEMO_STATION[end:]
    return text.replace("clock: real", "clock: virtual") if virtual else text


FOUR = """instruments:
  - {name: bay-1, resource: sim, channels: 1-5}
  - {name: bay-2, resource: sim, channels: 6-10, query_time: 0.4 ms}
  - {name: bay-3, resource: sim, channels: [11, 12, 13, 14, 15]}
  - {name: bay-4, resource: sim, channels: 16-20}
"""


def write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "station.yaml"
    path.write_text(text)
    return path


def test_the_single_form_is_one_instrument_with_the_tray():
    station = load_station(ROOT / "recipes" / "demo-station.yaml")
    (spec,) = station.instruments
    assert (spec.resource, spec.channels) == ("sim", tuple(range(1, 21)))
    assert station.channels == spec.channels and station.resource == "sim"


def test_several_instruments_each_with_its_channels(tmp_path):
    station = load_station(write(tmp_path, station_text(FOUR)))
    assert [s.name for s in station.instruments] == ["bay-1", "bay-2", "bay-3", "bay-4"]
    assert station.instruments[2].channels == (11, 12, 13, 14, 15)
    assert station.instruments[1].query_time_s == pytest.approx(0.4e-3)
    assert station.channels == tuple(range(1, 21))


@pytest.mark.parametrize(
    ("instruments", "message"),
    [
        ("instruments:\n  - {resource: sim, channels: 1-5}\n  - {resource: sim, channels: 5-9}\n",
         "instruments[1].channels shares channel 5 with smu1"),
        ("instruments:\n  - {resource: sim, channels: 1-5}\ntray: {channels: 6}\n",
         "tray goes with one instrument"),
        ("instruments:\n  - {resource: sim}\n", "instruments[0] needs 'channels'"),
        ("instruments: []\n", "instruments must be a list of 1 to 32 instruments"),
        ("instruments:\n  - {resource: sim, channels: 1-5}\n"
         "  - {resource: sim, channels: 6-9, line_frequency: 60 Hz}\n",
         "instruments[1].line_frequency must be the same for every instrument"),
        ("instruments:\n  - {name: a, resource: sim, channels: 1}\n"
         "  - {name: a, resource: sim, channels: [2]}\n", "repeats the instrument name 'a'"),
        # Two workers on one SMU interleave their commands (red-team finding 8); VISA names are
        # case-blind and board 0 may be left out (VPP-4.3 resource syntax, from memory).
        ("instruments:\n  - {resource: 'TCPIP0::smu-7.example::5025::SOCKET', channels: 1-5}\n"
         "  - {resource: 'TCPIP::SMU-7.example::5025::SOCKET', channels: 6-9}\n",
         "instruments[1].resource names the instrument smu1 already uses"),
        ("instruments:\n  - {resource: 'TCPIP0::192.0.2.9::5025::SOCKET', channels: 1-5}\n"
         "  - {resource: 'TCPIP0::192.0.2.9::5025::SOCKET', channels: 6-9}\n",
         "two workers would drive one SMU"),
        ("instruments:\n  - {resource: sim, channels: 1-5, query_time: 2 s}\n",
         "query_time must be above 0 and at most 1 s"),
    ],
)  # fmt: skip
def test_a_bad_instruments_list_is_refused_with_its_line(tmp_path, instruments, message):
    path = write(tmp_path, station_text(instruments))
    with pytest.raises(RecipeError, match=re.escape(message)) as caught:
        load_station(path)
    assert re.match(rf"{re.escape(str(path))}:\d+: ", str(caught.value))


def _run(tmp_path: Path, station: str, recipe: str, name: str):
    (tmp_path / f"{name}.yaml").write_text(station)
    out = tmp_path / name
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", f"recipes/{recipe}.yaml", "--station",
         str(tmp_path / f"{name}.yaml"), "--out", str(out)],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip
    assert done.returncode == 0, done.stdout + done.stderr
    with open(out / "devices.csv", newline="") as f:
        rows = [{k: r[k] for k in ("device", "verdict", "hard_bin", "regulated_current_A")}
                for r in csv.DictReader(f)]  # fmt: skip
    return done.stdout, out, rows


@pytest.mark.sim
def test_ccbench_run_on_four_instruments_gives_what_one_gives(tmp_path):
    single = DEMO_STATION.replace("clock: real", "clock: virtual")
    _, _, one = _run(tmp_path, single, "demo-production", "one")
    screen, out, four = _run(tmp_path, station_text(FOUR, virtual=True), "demo-production", "four")
    assert [r["device"] for r in four] == [f"FK2611-07-{c:03d}" for c in range(1, 21)]
    assert four == one  # the same devices, the same noise: the same readings and results
    assert sorted(p.name for p in out.glob("scpi-*.log")) == [f"scpi-bay-{x}.log" for x in "1234"]
    assert "(4 instruments at once)" in screen and "instrument bay-3:" in screen
    assert re.search(r"time: took .* predicted", screen)
    assert screen.strip().splitlines()[-1].startswith("output off on all 4 instruments")
    closed = (out / "scpi-bay-3.log").read_text()
    assert "ROUT:CLOS (@11)" in closed and "ROUT:CLOS (@1)\n" not in closed


def test_check_shows_the_estimate_for_four_instruments_at_once(tmp_path):
    from sequencer.plan.make import make_plan
    from sequencer.run.estimate import predict

    recipe = load_recipe(ROOT / "recipes" / "demo-production.yaml")
    several = load_recipe(
        ROOT / "recipes" / "demo-production.yaml",
        station_path=write(tmp_path, station_text(FOUR)),
    )
    one, four = predict(recipe, make_plan(recipe)), predict(several, make_plan(several))
    assert four.per_device_s == pytest.approx(one.per_device_s, rel=0.05)
    assert one.seconds / four.seconds > 3  # 20 devices on one SMU against 5 on each of four
