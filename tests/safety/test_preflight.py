"""Pre-flight: every planned level and compliance against the effective limits, and the
hazardous-voltage rules, before anything is started or opened. A refusal is one line naming the
step and the numbers, exit code 3."""

from __future__ import annotations

import socket

import pytest

import instruments
import instruments.embedded
from sequencer.model.errors import SafetyError
from sequencer.plan.make import make_plan
from sequencer.recipe.load import load_recipe
from sequencer.safety.rules import check_hazard, preflight
from tests.safety.bench import STATION, never, run_cli, write_bench
from tests.safety.test_limits import run_main


def sweep(stop: str, compliance: str = "5 mA", name: str = "iv") -> list[dict]:
    return [{"sweep": {"name": name, "start": "0 V", "stop": stop, "points": 5,
                       "compliance": compliance}}]  # fmt: skip


CASES = [
    # (recipe keys, station limits, the refusal's words)
    ({"steps": sweep("70 V", "1 mA")}, None,
     "step 'iv' reaches 70 V, above the station's maximum 60 V"),
    ({"steps": sweep("50 V", "1 mA"), "limits": {"max_voltage": "45 V"}}, None,
     "step 'iv' reaches 50 V, above the recipe's maximum 45 V"),
    ({"steps": sweep("41 V", "1 mA"), "ratings": {"peak_operating_voltage": "40 V"}}, None,
     "step 'iv' reaches 41 V, above the device's rated peak operating voltage 40 V"),
    ({"steps": sweep("10 V", "25 mA")}, None,
     "step 'iv' sets compliance 25 mA, above the station's maximum 20 mA"),
    ({"steps": sweep("40 V", "10 mA")}, None,
     "step 'iv' could deliver 40 V x 10 mA = 400 mW, above the station's maximum 250 mW"),
    ({"steps": sweep("40 V", "5 mA"), "limits": {"max_power": "150 mW"}}, None,
     "step 'iv' could deliver 40 V x 5 mA = 200 mW, above the recipe's maximum 150 mW"),
    ({"steps": sweep("40 V", "5 mA"), "ratings": {"max_dissipation": "100 mW"}}, None,
     "step 'iv' could dissipate 40 V x 5 mA = 200 mW in the device, above the device's rated "
     "dissipation 100 mW"),
    ({"steps": sweep("40 V", "5 mA"),
      "ratings": {"max_dissipation": "60 mW", "worst_case_current": "2 mA"}}, None,
     "step 'iv' could dissipate 40 V x 2 mA = 80 mW in the device, above the device's rated "
     "dissipation 60 mW"),
    ({"steps": sweep("50 V", "1 mA"), "hazardous_voltage": "acknowledged"},
     {"fixture": {"interlocked": False}},
     "step 'iv' reaches 50 V, above the touch-safe 42 V, but station TEST-bench declares no "
     "interlocked fixture"),
    ({"steps": sweep("50 V", "1 mA")}, None,
     "step 'iv' reaches 50 V, above the touch-safe 42 V: acknowledge it with "
     "'hazardous_voltage: acknowledged' in the recipe or --allow-hazardous-voltage"),
    ({"steps": sweep("30 V", "1 mA")}, {"limits": {**STATION["limits"],
                                                   "touch_safe_voltage": "24 V"}},
     "step 'iv' reaches 30 V, above the touch-safe 24 V: acknowledge it"),
]  # fmt: skip


@pytest.mark.robustness
@pytest.mark.parametrize(("recipe", "station", "words"), CASES)
def test_refusal_names_step_and_numbers_and_touches_nothing(
    tmp_path, monkeypatch, recipe, station, words
):
    path = write_bench(tmp_path, recipe=recipe, station=station)
    monkeypatch.setattr(instruments, "connect", never)
    monkeypatch.setattr(instruments.embedded.EmbeddedSimulator, "start", never)
    out = tmp_path / "run"
    code, text = run_main("run", str(path), "--sim", "--out", str(out))
    assert code == 3, text
    lines = text.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("ccbench: ")
    assert words in lines[0]
    assert not out.exists()  # not even the run folder
    code, text = run_main("check", str(path))
    assert code == 3 and words in text


def test_the_acknowledgement_may_come_from_the_command_line(tmp_path):
    path = write_bench(tmp_path, recipe={"steps": sweep("50 V", "1 mA")})
    assert run_main("check", str(path))[0] == 3
    code, text = run_main("check", str(path), "--allow-hazardous-voltage")
    assert code == 0, text
    assert "above: interlock + ack" in text


def test_every_level_is_checked_not_only_the_last(tmp_path):
    # a sweep that comes back down: its peak is in the middle of the list
    steps = [{"sweep": {"name": "up", "start": "-70 V", "stop": "0 V", "points": 8,
                        "compliance": "1 mA"}}]  # fmt: skip
    recipe = load_recipe(write_bench(tmp_path, recipe={"steps": steps}))
    with pytest.raises(SafetyError, match="step 'up' reaches 70 V, above the station's"):
        preflight(make_plan(recipe), recipe.effective_limits)


def test_hazard_rules_pass_with_fixture_and_acknowledgement(tmp_path):
    path = write_bench(
        tmp_path, recipe={"steps": sweep("50 V", "1 mA"), "hazardous_voltage": "acknowledged"}
    )
    recipe = load_recipe(path)
    plan = make_plan(recipe)
    limits = preflight(plan, recipe.effective_limits)
    check_hazard(plan, limits, station="x", interlocked=True, acknowledged=True)


@pytest.mark.robustness
def test_a_refused_run_never_connects_to_the_station_resource(tmp_path):
    """A real process and a real listening socket as the instrument: nobody ever connects."""
    with socket.create_server(("127.0.0.1", 0)) as listener:
        listener.settimeout(0.2)
        port = listener.getsockname()[1]
        station = {"instrument": {"resource": f"TCPIP0::127.0.0.1::{port}::SOCKET"}}
        path = write_bench(tmp_path, recipe={"steps": sweep("70 V", "1 mA")}, station=station)
        done = run_cli(["run", str(path), "--out", str(tmp_path / "run")])
        assert done.returncode == 3, done.stdout + done.stderr
        assert "step 'iv' reaches 70 V, above the station's maximum 60 V" in done.stderr
        with pytest.raises(TimeoutError):
            listener.accept()


@pytest.mark.robustness
def test_a_station_cannot_switch_the_hazardous_voltage_rules_off(tmp_path, monkeypatch):
    """Red team 9: touch_safe_voltage 1e9 V without an interlock let a 55 V spot run with no
    acknowledgement and no interlock read. Now the station itself is refused."""
    limits = {**STATION["limits"], "touch_safe_voltage": "1e9 V"}
    station = {"limits": limits, "fixture": {"interlocked": False}}
    steps = [{"spot": {"name": "hv", "voltage": "55 V", "compliance": "1 mA", "repeats": 2}}]
    path = write_bench(tmp_path, recipe={"steps": steps}, station=station)
    monkeypatch.setattr(instruments, "connect", never)
    monkeypatch.setattr(instruments.embedded.EmbeddedSimulator, "start", never)
    out = tmp_path / "run"
    code, text = run_main("run", str(path), "--sim", "--out", str(out))
    assert code == 2, text
    assert "limits.touch_safe_voltage must not exceed max_voltage (60 V; got 1 GV)" in text
    assert not out.exists()
