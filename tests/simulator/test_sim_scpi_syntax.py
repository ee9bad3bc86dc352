"""SCPI syntax: headers, optional nodes, suffixes, compound messages, parameters.

Rules as summarised in /work/shared/SCPI.md 3.4-3.5 (SCPI-1999 Vol 1 ch 6-7 and IEEE 488.2 ch 7,
from memory where SCPI.md marks them so).
"""

from __future__ import annotations

import pytest

from tests.simulator.conftest import errors


def level(session) -> float:
    return float(session.handle("SOUR:VOLT?"))


@pytest.mark.reference
@pytest.mark.parametrize(
    "header",
    ["SOUR:VOLT", "sour:volt", "SOURCE:VOLTAGE", "SoUrCe:VoLtAgE", "VOLT", "voltage",
     "SOUR:VOLT:LEV:IMM:AMPL", "source:voltage:level:immediate:amplitude", "VOLT:AMPL",
     "VOLT:LEV", ":VOLT", "SOUR1:VOLT1", "SOURce:VOLTage:LEVel"],
)  # fmt: skip
def test_short_long_any_case_optional_nodes_and_suffix_1(session, header):
    # SCPI-1999 Vol 1 ch 6: exact short or long form, any case; [ ] nodes optional [from memory]
    session.handle(f"{header} 3.25")
    assert level(session) == 3.25
    assert errors(session) == []


@pytest.mark.reference
@pytest.mark.parametrize(
    ("header", "code"),
    [("MEASU:CURR?", -113), ("SOURC:VOLT 1", -113), ("VOLTA 1", -113), ("SOUR2:VOLT 1", -114),
     ("OUTP9 ON", -114), ("VOLT:LEV:LEV 1", -113), ("READ", -113), ("*RST?", -113),
     ("SYST:ERR:NEXT", -113), ("VOLTAGEVOLTAGE 1", -112), ("VO$T 1", -102), ("VOLT::LEV 1", -102)],
)  # fmt: skip
def test_header_errors(session, header, code):
    # SCPI-1999 Vol 1 ch 6 / SCPI.md 3.3: -113 undefined header (MEASU), -114 suffix out of range,
    # -112 mnemonic longer than 12 characters, -102 syntax error
    assert session.handle(header) is None
    assert errors(session) == [code]


@pytest.mark.reference
def test_semicolon_path_rule(session):
    # IEEE 488.2 ch 7 / SCPI Vol 1 ch 6: after ';' the header is relative to the last node;
    # a leading ':' returns to the root; '*' commands keep the path [from memory, SCPI.md 3.4]
    session.handle("SOUR:VOLT 1;CURR:LIM 2E-3")
    assert session.handle("SOUR:CURR:LIM?") == "+2.000000E-03"
    session.handle("SENS:CURR:NPLC 2;*CLS;NPLC 3;RANG:AUTO OFF")
    assert session.handle("SENS:CURR:NPLC?;RANG:AUTO?") == "+3.000000E+00;0"
    session.handle("SOUR:VOLT 2;:OUTP ON")
    assert session.handle("OUTP?;:SOUR:VOLT?") == "1;+2.000000E+00"
    assert errors(session) == []


@pytest.mark.reference
def test_path_rule_is_strict_without_leading_colon(session):
    session.handle("SENS:CURR:NPLC 2;OUTP ON")  # resolves to SENS:CURR:OUTP: undefined
    assert errors(session) == [-113]
    assert session.handle("OUTP?") == "0"


def test_several_queries_give_one_reply_joined_by_semicolons(session):
    reply = session.handle("*IDN?;SYST:VERS?;*OPC?;:SIM:TRAY:COUN?")
    assert reply.split(";")[1:] == ["1999.0", "1", "5"]


def test_command_error_discards_the_rest_of_the_message(session):
    # IEEE 488.2 6.1.6 (from memory): after a command error the parser skips to the terminator
    assert session.handle("*OPC?;BOGUS;*IDN?") == "1"
    session.handle("VOLT 9E9;VOLT 4")  # an execution error lets the message go on
    assert level(session) == 4.0
    assert errors(session) == [-113, -222]


@pytest.mark.reference
@pytest.mark.parametrize(
    ("text", "volts"),
    [("25V", 25.0), ("25 V", 25.0), ("250 mV", 0.25), ("250MV", 0.25), ("0.1 kV", 100.0),
     ("1.5e1", 15.0), ("+.5", 0.5), ("-2", -2.0), ("100uV", 1e-4), ("MIN", -200.0),
     ("maximum", 200.0), ("DEF", 0.0)],
)  # fmt: skip
def test_numbers_units_and_special_values(session, text, volts):
    # IEEE 488.2 7.7.2-7.7.3 NRf and suffixes; SCPI Vol 1 7.2 MINimum/MAXimum/DEFault [SCPI.md 3.5]
    session.handle(f"VOLT {text}")
    assert level(session) == pytest.approx(volts, rel=1e-12)
    assert errors(session) == []


@pytest.mark.reference
@pytest.mark.parametrize(
    ("text", "amps"),
    [("2 MA", 2e-3), ("2mA", 2e-3), ("20 uA", 2e-5), ("100 nA", 1e-7), ("0.05A", 0.05)],
)
def test_ma_means_milliampere(session, text, amps):
    # SCPI.md 3.5 [from memory, IEEE 488.2 7.7.3]: MA is milli + A; mega would be MAA
    session.handle(f"CURR:LIM {text}")
    assert float(session.handle("CURR:LIM?")) == pytest.approx(amps, rel=1e-12)


@pytest.mark.reference
def test_mega_exceptions_and_seconds(session):
    from simulator.scpi_params import unit_scale

    assert unit_scale("MOHM", "OHM") == 1e6 and unit_scale("MHZ", "HZ") == 1e6  # SCPI.md 3.5
    assert unit_scale("MAA", "A") == 1e6 and unit_scale("KOHM", "OHM") == 1e3
    session.handle("TRIG:DEL 20 ms")
    assert session.handle("TRIG:DEL?") == "+2.000000E-02"


@pytest.mark.reference
@pytest.mark.parametrize(
    ("message", "code"),
    [("VOLT", -109), ("VOLT 1,2", -108), ("*RST 1", -108), ("VOLT 1 FOO", -131), ("VOLT 1A", -131),
     ("SENS:CURR:NPLC 1V", -138), ("OUTP 1V", -138), ("VOLT 1 ABCDEFGHIJKLM", -134),
     ("VOLT BANANA", -141), ("OUTP MAYBE", -141), ("FUNC:MODE BANANA", -141),
     ("VOLT \"1\"", -104), ("OUTP (@1)", -104), ("ROUT:CLOS 1", -104), ("FUNC:MODE 1", -104),
     ('SENS:FUNC "VOLT', -151), ("SENS:FUNC VOLT", -104), ("VOLT 1.2.3", -102),
     ("OUTP ABCDEFGHIJKLMNOP", -144), ("READ? 5", -108), ("VOLT 500", -222), ("CURR:LIM 0.2", -222),
     ("CURR:LIM 1e-10", -222), ("TRIG:DEL 11", -222), ("SENS:CURR:NPLC 0.001", -222),
     ("SENS:CURR:RANG 1", -222), ("*ESE 256", -222), ("FUNC:MODE CURR", -224),
     ("SYST:LFR 55", -224), ('SENS:FUNC "VOLT","RES"', -224)],
)  # fmt: skip
def test_parameter_errors(session, message, code):
    # error numbers and their meaning: SCPI-1999 Vol 2 21.8, as listed in SCPI.md 3.3 and wire.md
    before = session.handle("VOLT?;:CURR:LIM?;:OUTP?")
    assert session.handle(message) is None
    assert errors(session) == [code]
    assert session.handle("VOLT?;:CURR:LIM?;:OUTP?") == before  # nothing was applied


def test_booleans_strings_and_character_data(session):
    for text, expect in [("ON", "1"), ("off", "0"), ("1", "1"), ("0", "0"), ("OFF", "0")]:
        session.handle(f"SENS:CURR:RANG:AUTO {text}")
        assert session.handle("SENS:CURR:RANG:AUTO?") == expect
    session.handle("SENS:FUNC 'CURR'")
    assert session.handle("SENS:FUNC?") == '"CURR"'
    session.handle('SENSe:FUNCtion:ON "VOLT","CURR"')
    assert session.handle("FUNC?") == '"VOLT","CURR"'
    session.handle("SOUR:FUNC:MODE volt")
    assert session.handle("SOUR:FUNC:MODE?") == "VOLT"
    assert errors(session) == []


@pytest.mark.reference
def test_channel_lists(session):
    # SCPI-1999 Vol 1 8.3 channel lists (@1), (@1,3), (@2:4) [from memory]
    from simulator.scpi_params import ChannelList, lex

    assert lex("(@1)") == ChannelList((1,))
    assert lex("(@1,3)") == ChannelList((1, 3))
    assert lex("(@2:4)") == ChannelList((2, 3, 4))
    assert lex("(@)") == ChannelList(())
    session.handle("ROUT:CLOS (@2)")
    assert session.handle("ROUT:CLOS? (@1,2,3)") == "0,1,0"
    assert session.handle("ROUT:CLOS? (@1:3)") == "0,1,0"


def test_min_max_queries(session):
    assert session.handle("VOLT? MIN;VOLT? MAX") == "-2.000000E+02;+2.000000E+02"
    assert session.handle("CURR:LIM? MAX;:CURR:LIM? DEF") == "+1.000000E-01;+1.000000E-03"
    assert session.handle("SENS:CURR:RANG? MIN") == "+1.000000E-06"
    assert session.handle("SENS:CURR:NPLC? MIN") == "+1.000000E-02"
    assert session.handle("VOLT? BANANA") is None
    assert errors(session) == [-108]


def test_trailing_carriage_return_and_blank_units_are_ignored(session):
    assert session.handle("*OPC?\r") == "1"
    assert session.handle("") is None
    assert session.handle("*OPC?;;") == "1"
    assert errors(session) == []


def test_readings_carry_the_sensed_functions_in_their_order(session):
    # SCPI-1999 SENSe:FUNCtion (SCPI.md 3.6): a reading holds what the instrument senses
    session.handle("ROUT:CLOS (@1);:OUTP ON;:VOLT 1")
    session.handle('SENS:FUNC "CURR"')
    assert len(session.handle("READ?").split(",")) == 1
    session.handle('SENS:FUNC "CURR","VOLT"')
    current, voltage = (float(v) for v in session.handle("READ?").split(","))
    assert voltage == pytest.approx(1.0, abs=1e-3) and 0 < current < 5e-3
    session.handle('SENS:FUNC "VOLT","CURR";:FORM:FIEL VOLT,CURR,STAT')  # our node, after it
    assert len(session.handle("READ?").split(",")) == 3
    session.handle("OUTP OFF")
    assert errors(session) == []
