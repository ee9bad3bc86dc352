"""The fault schedule on its own: spec syntax, counting, seeding, the control node, the options."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe import load as recipe_module
from sequencer.recipe.format import station as station_format
from simulator import Session, SimOptions, build_instrument
from simulator import __main__ as cli
from simulator.errors import OptionError
from simulator.faults import (
    KEYS,
    KINDS,
    FaultSpec,
    fault_from_mapping,
    load_faults,
    parse_duration,
    parse_fault,
)
from tests.simulator.conftest import errors


def session_with(*texts: str, seed: int = 1) -> Session:
    faults = tuple(parse_fault(text) for text in texts)
    return Session(
        build_instrument(SimOptions(clock="virtual", devices=3, seed=seed, faults=faults))
    )


def test_text_form_parses_every_key_and_round_trips():
    spec = parse_fault("late-reply:on=READ?|MEAS:CURR?,after=10,channel=2,delay=250ms,count=0")
    assert spec == FaultSpec("late-reply", "READ?|MEAS:CURR?", 10, 2, 0.25, count=0)
    assert parse_fault(spec.text()) == spec
    error = parse_fault("ERROR:on=SOUR:VOLT,code=-222,chance=0.5")
    assert (error.kind, error.on, error.code, error.chance) == ("error", "SOUR:VOLT", -222, 0.5)
    assert parse_fault("close") == FaultSpec("close")
    assert parse_fault(FaultSpec("close").text()) == FaultSpec("close")


def test_mapping_form_matches_the_text_form():
    mapping = {"kind": "no-reply", "on": "READ?", "after": 3, "delay": "2 s"}
    assert fault_from_mapping(mapping) == parse_fault("no-reply:on=READ?,after=3,delay=2")


@pytest.mark.parametrize(("value", "seconds"), [(2, 2.0), ("1.5", 1.5), ("20 ms", 0.02)])
def test_durations(value, seconds):
    assert parse_duration(value) == pytest.approx(seconds)


@pytest.mark.parametrize(
    ("text", "problem"),
    [
        ("melt", "unknown kind"),
        ("close:when=3", "unknown key"),
        ("close:after", "not KEY=VALUE"),
        ("close:after=-1", "'after' must be >= 0"),
        ("close:after=1.5", "whole number"),
        ("late-reply:delay=soon", "'delay' must be seconds"),
        ("error:code=-999", "not a known SCPI error"),
        ("error:chance=0", "'chance'"),
        ("garbage:on=point", "instrument fault"),
        ("close:on=READ?|", "'on' needs SCPI headers"),
    ],
)
def test_bad_specs_say_what_is_wrong(text, problem):
    with pytest.raises(OptionError, match=problem):
        parse_fault(text)


def test_a_header_the_instrument_lacks_is_refused_when_armed():
    with pytest.raises(OptionError, match="'READX\\?' is not a command"):
        build_instrument(SimOptions(faults=(parse_fault("close:on=READX?"),)))


def test_after_and_count_choose_which_matches_fire():
    s = session_with("no-reply:on=*IDN?,after=2,count=2")
    got = [s.handle("*IDN?") for _ in range(6)]
    assert [reply is None for reply in got] == [False, False, True, True, False, False]


def test_any_spelling_matches_and_the_query_mark_restricts():
    s = session_with("no-reply:on=SOURce:VOLTage:LEVel?,count=0")
    assert s.handle("VOLT 2;:VOLT?") is None  # short form, optional nodes left out
    assert s.handle("sour:volt:lev:imm:ampl?") is None
    assert s.handle("OUTP?") == "0"
    s = session_with("error:on=VOLT,count=0")  # no '?': the command and the query form
    s.handle("VOLT 3")
    assert s.handle("OUTP?;:VOLT?") == "0"
    assert errors(s) == [-200, -200]


def test_without_on_every_unit_counts_but_simulation_units_never_do():
    s = session_with("no-reply:after=2")
    s.handle("SIM:TRAY:COUN?;:SIM:LID?;:SIM:BUSY?")  # control traffic does not count
    assert s.handle("*IDN?;*OPC?") is not None  # units 1 and 2
    assert s.handle("OUTP?") is None  # unit 3 fires


def test_channel_filter_counts_only_while_that_channel_is_connected():
    s = session_with("device-open:on=point,channel=2")
    s.handle("ROUT:CLOS (@1);:SOUR:VOLT 10;CURR:LIM 10 MA;:OUTP ON")
    assert float(s.handle("READ?").split(",")[1]) > 1e-3
    s.handle("OUTP OFF;:ROUT:CLOS (@2);:OUTP ON")
    assert abs(float(s.handle("READ?").split(",")[1])) < 1e-9  # now an open circuit
    s.handle("OUTP OFF;:ROUT:CLOS (@1);:OUTP ON")
    assert float(s.handle("READ?").split(",")[1]) > 1e-3  # the other devices are untouched


def test_chance_is_seeded_the_same_traffic_gives_the_same_firings():
    def pattern(seed: int) -> list[bool]:
        s = session_with("no-reply:on=*IDN?,count=0,chance=0.5", seed=seed)
        return [s.handle("*IDN?") is None for _ in range(40)]

    assert pattern(5) == pattern(5)
    assert pattern(5) != pattern(6)
    assert 8 < sum(pattern(5)) < 32


def test_garbage_is_seeded_and_never_a_number_or_a_block():
    lines = [session_with("garbage:on=OUTP?", seed=9).handle("OUTP?") for _ in range(2)]
    assert lines[0] == lines[1] and lines[0].startswith("?")
    other = session_with("garbage:on=OUTP?", seed=10).handle("OUTP?")
    assert other != lines[0]


def test_error_fault_refuses_the_unit_instead_of_running_it():
    s = session_with("error:on=SOUR:VOLT,code=-222")
    s.handle("SOUR:VOLT 12")
    assert s.handle("SOUR:VOLT?") == "+0.000000E+00"
    assert s.handle("SYST:ERR?") == '-222,"Data out of range;injected fault on SOUR:VOLT"'


def test_lid_open_forces_a_hazardous_output_off_and_says_so():
    s = session_with("lid-open:on=point,after=1")
    s.handle("ROUT:CLOS (@1);:SOUR:VOLT 45;:OUTP ON")
    s.handle("READ?")
    assert s.handle("OUTP?;:SYST:INT?") == "1;1"
    s.handle("READ?")  # the second acquisition opens the lid
    assert s.handle("OUTP?;:SYST:INT?") == "0;0"
    forced_off = '-300,"Device-specific error;interlock opened, output switched off"'
    assert s.handle("SYST:ERR?") == forced_off


def test_control_node_arms_clears_and_counts():
    s = session_with()
    s.handle('SIM:FAUL "no-reply:on=*IDN?,count=2"')
    assert s.handle("SIM:FAUL:PEND?;FIR?") == "1;0"
    assert s.handle("*IDN?") is None
    assert s.handle("SIM:FAUL:PEND?;FIR?") == "1;1"
    s.handle("SIM:FAUL:CLE")
    assert s.handle("*IDN?") is not None
    assert s.handle("SIM:FAUL:PEND?;FIR?") == "0;1"
    s.handle('SIM:FAUL "close:on=BOGUS"')
    assert errors(s) == [-224]


def test_command_line_and_file(tmp_path: Path):
    listed = tmp_path / "faults.yaml"
    listed.write_text('faults:\n  - {kind: garbage, on: "OUTP?"}\n  - close:on=READ?,after=4\n')
    args = cli.build_parser().parse_args(
        ["serve", "--faults", str(listed), "--fault", "no-reply:on=*IDN?", "--fault", "lid-open"]
    )
    kinds = [spec.kind for spec in cli.options_from(args).faults]
    assert kinds == ["garbage", "close", "no-reply", "lid-open"]
    assert load_faults(listed)[1] == parse_fault("close:on=READ?,after=4")
    assert cli.main(["serve", "--fault", "melt"]) == 2  # refused before anything listens


def test_station_file_vocabulary_matches_the_simulator():
    assert station_format.FAULT_KINDS == KINDS
    assert station_format.FAULT_KEYS == KEYS


STATION = """station: bench
instrument: {{resource: sim}}
tray: {{channels: 2}}
limits: {{max_voltage: 30 V, max_current: 10 mA, max_power: 300 mW}}
simulator:
  seed: 4
  faults:
{faults}
"""


def test_station_faults_are_read_with_their_line(tmp_path: Path):
    path = tmp_path / "station.yaml"
    listed = '    - late-reply:on=READ?\n    - {kind: close, on: "READ?", after: 3}'
    path.write_text(STATION.format(faults=listed))
    station = recipe_module.load_station(path)
    close = {"kind": "close", "on": "READ?", "after": 3}  # a bare `on:` key is YAML 1.1's true
    assert station.simulator_options["faults"] == ("late-reply:on=READ?", close)
    path.write_text(STATION.format(faults="    - close\n    - {kind: melt}"))
    with pytest.raises(RecipeError, match=r"station.yaml:9: simulator.faults\[1\].kind must be"):
        recipe_module.load_station(path)
    path.write_text(STATION.format(faults="    - {kind: close, when: 3}"))
    with pytest.raises(RecipeError, match=r":8: simulator.faults\[0\].when is not a known"):
        recipe_module.load_station(path)


def test_embedded_command_line_carries_faults_and_thermal_options():
    from instruments.embedded import simulator_command

    faults = ["close:after=3", {"kind": "error", "on": "SOUR:VOLT", "code": -222}]
    command = simulator_command({"faults": faults, "temperature": 85, "thermal_resistance": 200})
    args = cli.build_parser().parse_args(command[3:])
    options = cli.options_from(args)
    assert options.faults == (
        parse_fault("close:after=3"),
        parse_fault("error:on=SOUR:VOLT,code=-222"),
    )
    assert (options.temperature, options.thermal_resistance) == (85.0, 200.0)
