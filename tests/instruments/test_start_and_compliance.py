"""Compliance detection without a status bit, separate bits for single and list readings, the
one-time setup and the drain of stale errors at start: against a responder written from a plain
description (tests/instruments/plainsmu.py) over a real TCP socket through pyvisa-py."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from instruments.dialect import DEFAULT_CLAMP_FRACTION, parse_dialect
from instruments.errors import DialectError, ReplyError, ScpiError
from instruments.smu import ScpiSmu
from instruments.transport import open_visa
from tests.instruments.plainsmu import PlainSmu

DIALECT = """\
name: plain
description: the responder of tests/instruments/plainsmu.py
identify: "*IDN?"
reset: "*RST"
clear_status: "*CLS"
operation_complete: "*OPC?"
next_error: "SYST:ERR?"
setup: ["*RST", "*CLS"]
source_voltage_mode: null
set_voltage: "VOLT {volts}"
set_current_limit: "CURR:LIM {amps}"
set_settle: null
set_aperture_nplc: null
set_current_range: null
set_current_range_auto: null
sense_functions: null
output: "OUTP {state}"
output_query: "OUTP?"
measure: "MEAS?"
measure_fields: [voltage, current, status]
compliance_bit: 1
select_channel: null
open_all_channels: null
interlock_query: null
list_voltage: "VOLT:MODE LIST;:LIST:VOLT {values};:LIST:COUN {count}"
initiate: "INIT"
fetch: "FETC?"
fetch_fields: [voltage, current, status]
list_compliance_bit: 3
fixed_mode: "VOLT:MODE FIX"
"""
NO_STATUS = {
    "measure_fields: [voltage, current, status]": "measure_fields: [voltage, current]",
    "compliance_bit: 1": "compliance_bit: null",
}


def _dialect(**changes: str):
    text = DIALECT
    for old, new in changes.items():
        assert old in text, old
        text = text.replace(old, new)
    return parse_dialect(text, "plain.yaml")


@pytest.fixture
def connect(scripted_server) -> Iterator:
    opened: list[ScpiSmu] = []

    def make(responder: PlainSmu, dialect) -> ScpiSmu:
        server = scripted_server(responder.respond)
        smu = ScpiSmu(open_visa(server.resource, timeout_s=2.0), dialect)
        opened.append(smu)
        return smu

    yield make
    for smu in opened:
        smu.close()


def _short_reading(connect, responder: PlainSmu, dialect):
    smu = connect(responder, dialect)
    smu.start_up()
    smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
    smu.set_voltage(30.0)
    smu.output(True)
    return smu.measure()


def test_a_short_clamped_half_a_percent_low_is_caught_without_a_status_bit(connect) -> None:
    # 30 V into 5 ohm wants 6 A; the source clamps at 4.975 mA (0.5 % below its 5 mA limit).
    dialect = _dialect(**NO_STATUS)
    reading = _short_reading(connect, PlainSmu(ohms=5.0, single_bit=None), dialect)
    assert reading.current_a == pytest.approx(4.975e-3)
    assert reading.in_compliance
    assert dialect.compliance_rules()["single"].startswith("clamp fraction")


def test_a_device_well_inside_the_limit_is_not_taken_for_a_clamp(connect) -> None:
    reading = _short_reading(connect, PlainSmu(ohms=10e3, single_bit=None), _dialect(**NO_STATUS))
    assert reading.current_a == pytest.approx(3e-3)
    assert not reading.in_compliance


def test_a_dialect_sets_its_own_clamp_fraction(connect) -> None:
    # With 0.999 (the old fixed rule) the 0.5 % low clamp is missed: the key is what decides.
    dialect = _dialect(**NO_STATUS, **{"fixed_mode": "clamp_fraction: 0.999\nfixed_mode"})
    assert not _short_reading(connect, PlainSmu(ohms=5.0, single_bit=None), dialect).in_compliance
    assert DEFAULT_CLAMP_FRACTION < 0.995  # the default covers a clamp 0.5 % low


def test_list_readings_use_their_own_status_bit(connect) -> None:
    responder = PlainSmu(ohms=5.0, single_bit=1, list_bit=3)
    smu = connect(responder, _dialect())
    smu.start_up()
    smu.set_current_limit(5e-3)
    smu.output(True)
    _, current, limited = smu.list_sweep([0.0, 1e-3, 30.0], limit_a=5e-3, nplc=1, settle_s=0)
    assert current[-1] == pytest.approx(4.975e-3)
    assert list(limited) == [False, False, True]  # bit 3 of the list word, not bit 1


def test_a_list_status_without_its_own_bit_is_refused() -> None:
    with pytest.raises(DialectError) as caught:
        _dialect(**{"list_compliance_bit: 3\n": ""})
    assert "list_compliance_bit" in str(caught.value)
    assert "plain.yaml:28:" in str(caught.value)


def test_stale_power_on_errors_are_reported_not_raised_nor_blamed_later(connect) -> None:
    responder = PlainSmu(errors=['-315,"Configuration memory lost"'])
    smu = connect(responder, _dialect())
    assert smu.start_up() == [(-315, "Configuration memory lost")]
    smu.configure(limit_a=5e-3, nplc=1, settle_s=0)  # its error check finds nothing now
    assert smu.stale_errors == [(-315, "Configuration memory lost")]


def test_a_refused_setup_command_is_named(connect) -> None:
    dialect = _dialect(**{'setup: ["*RST", "*CLS"]': 'setup: ["*RST", "SENS:AZER ON"]'})
    with pytest.raises(ScpiError) as caught:
        connect(PlainSmu(), dialect).start_up()
    assert "SENS:AZER ON" in str(caught.value) and caught.value.code == -113


@pytest.mark.parametrize("key", ["set_current_limit", "source_voltage_mode", "set_voltage"])
def test_a_reset_inside_a_per_device_key_is_refused(key: str) -> None:
    text = {
        "set_current_limit": ('"CURR:LIM {amps}"', '"*RST;:CURR:LIM {amps}"'),
        "source_voltage_mode": ("source_voltage_mode: null", 'source_voltage_mode: "*rst"'),
        "set_voltage": ('"VOLT {volts}"', '":VOLT {volts};*RST"'),
    }[key]
    with pytest.raises(DialectError) as caught:
        _dialect(**{text[0]: text[1]})
    message = str(caught.value)
    assert key in message and "setup" in message and "plain.yaml:" in message


def test_setup_must_be_a_list_of_commands(tmp_path: Path) -> None:
    with pytest.raises(DialectError, match="setup"):
        _dialect(**{'setup: ["*RST", "*CLS"]': 'setup: "*RST"'})


def test_without_a_switch_command_channel_1_is_the_terminals_and_2_is_refused(connect) -> None:
    responder = PlainSmu()
    smu = connect(responder, _dialect())  # select_channel: null
    smu.select_channel(1)
    assert responder.errors == []  # nothing was sent that the responder would refuse
    with pytest.raises(DialectError, match="select_channel"):
        smu.select_channel(2)


def test_the_output_read_back_is_never_a_leftover_line(connect) -> None:
    # The reading comes split over two lines (fields the dialect does not expect): the second
    # line, "0", is still waiting when the output is read back. The output has in truth stayed
    # on (this instrument ignores OUTP OFF), so a leftover "0" would be a lie.
    responder = PlainSmu(ohms=10e3, single_bit=None)
    real = responder.respond

    def split_and_stuck(message: str) -> bytes | None:
        if message == "MEAS?":
            return b"1.000000E+00,1.000000E-04\n0\n"
        if message == "OUTP OFF":
            return None
        return real(message)

    responder.respond = split_and_stuck  # type: ignore[method-assign]
    smu = connect(responder, _dialect())
    smu.output(True)
    responder.output_on = True
    with pytest.raises(ReplyError):
        smu.measure()
    smu.output(False)
    assert smu.output_is_on()  # the instrument's true answer, not the stale "0"
