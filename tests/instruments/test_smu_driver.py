"""ScpiSmu against a scripted in-process instrument: the exact SCPI text, and reply parsing."""

from __future__ import annotations

import dataclasses
import logging
import math

import pytest

from instruments.dialect import Dialect
from instruments.errors import DialectError, InstrumentDisconnected, ReplyError, ScpiError
from instruments.loopback import CallableTransport
from instruments.smu import MAX_ERROR_READS, Reading, ScpiSmu

MEASURE = "READ?;:STAT:QUES:COND?;:SYST:ERR:COUN?"


def test_configure_sends_the_dialect_text_in_order(smu: ScpiSmu, instrument) -> None:
    smu.configure(limit_a=1e-3, nplc=1.0, settle_s=0.02)
    assert instrument.sent == [
        "SOUR:FUNC:MODE VOLT",
        "SOUR:CURR:LIM 1.000000E-03",
        "SENS:CURR:NPLC 1.000000E+00",
        "TRIG:DEL 2.000000E-02",
        "SENS:CURR:RANG:AUTO ON",
        'SENS:FUNC "VOLT","CURR"',
        "SYST:ERR?",
    ]


def test_configure_with_a_fixed_range(smu: ScpiSmu, instrument) -> None:
    smu.configure(limit_a=2e-3, nplc=0.1, settle_s=0.0, current_range_a=1e-2)
    assert "SENS:CURR:RANG 1.000000E-02" in instrument.sent
    assert "SENS:CURR:RANG:AUTO ON" not in instrument.sent


@pytest.mark.parametrize(
    "kwargs",
    [
        {"limit_a": 0.0, "nplc": 1.0, "settle_s": 0.0},
        {"limit_a": 1e-3, "nplc": math.inf, "settle_s": 0.0},
        {"limit_a": 1e-3, "nplc": 1.0, "settle_s": -1.0},
        {"limit_a": 1e-3, "nplc": 1.0, "settle_s": 0.0, "current_range_a": -1.0},
    ],
)
def test_configure_refuses_impossible_settings_before_sending(
    smu: ScpiSmu, instrument, kwargs
) -> None:
    with pytest.raises(ValueError):
        smu.configure(**kwargs)
    assert instrument.sent == []


def test_configure_raises_the_instruments_errors(smu: ScpiSmu, instrument) -> None:
    instrument.errors = ['-222,"Data out of range;CURR:LIM 5"', '-224,"Illegal parameter value"']
    with pytest.raises(ScpiError) as caught:
        smu.configure(limit_a=5.0, nplc=1.0, settle_s=0.0)
    error = caught.value
    assert (error.code, error.text) == (-222, "Data out of range;CURR:LIM 5")
    assert error.entries == (
        (-222, "Data out of range;CURR:LIM 5"),
        (-224, "Illegal parameter value"),
    )
    assert "SOUR:CURR:LIM 5.000000E+00" in str(error)  # what was sent, to find the culprit
    assert instrument.sent.count("SYST:ERR?") == 3  # both entries, then the empty queue


def test_check_errors_stops_at_no_error(smu: ScpiSmu, instrument) -> None:
    smu.check_errors()
    assert instrument.sent == ["SYST:ERR?"]


def test_check_errors_gives_up_on_a_queue_that_never_empties(
    dialect: Dialect, make_instrument
) -> None:
    instrument = make_instrument()
    instrument.errors = ['-350,"Queue overflow"'] * 100
    smu = ScpiSmu(CallableTransport(instrument), dialect)
    with pytest.raises(ScpiError, match="not empty after 20 reads"):
        smu.check_errors()
    assert len(instrument.sent) == MAX_ERROR_READS


def test_check_errors_refuses_a_garbled_entry(smu: ScpiSmu, instrument) -> None:
    instrument.errors = ["garbage"]
    with pytest.raises(ReplyError, match="SYST:ERR"):
        smu.check_errors()


@pytest.mark.parametrize(
    ("reply", "expected"),
    [
        ("+2.500000E+01,+1.812345E-03;0;0", Reading(25.0, 1.812345e-3, False)),
        ("+1.200000E+01,+5.000000E-04;2;0", Reading(12.0, 5e-4, True)),  # bit 1: limit active
        ("+2.500000E+01,+1.800000E-03;1;0", Reading(25.0, 1.8e-3, False)),  # bit 0 is voltage
        ("+2.500000E+01,+1.800000E-03;+3;0", Reading(25.0, 1.8e-3, True)),
    ],
)
def test_measure_parses_one_reading(smu: ScpiSmu, instrument, reply, expected) -> None:
    instrument.replies[MEASURE] = reply
    assert smu.measure() == expected
    assert instrument.sent == [MEASURE]


def test_measure_maps_special_values(smu: ScpiSmu, instrument) -> None:
    instrument.replies[MEASURE] = "9.91E+37,-9.9E+37;0;0"  # SCPI-1999 Vol 1 7.2.1.4-5
    reading = smu.measure()
    assert math.isnan(reading.voltage_v)
    assert reading.current_a == -math.inf


@pytest.mark.parametrize(
    "reply", ["+2.5E+01,+1.8E-03;0", "+2.5E+01,+1.8E-03;0;0;7", "a,b;0;0", "1,2;x;0", "1,2;0;z"]
)
def test_measure_refuses_a_reply_of_the_wrong_shape(smu: ScpiSmu, instrument, reply) -> None:
    instrument.replies[MEASURE] = reply
    with pytest.raises(ReplyError, match=r"READ\?"):
        smu.measure()


def test_measure_raises_the_queued_errors_instead_of_returning_the_reading(
    smu: ScpiSmu, instrument
) -> None:
    instrument.replies[MEASURE] = "+2.0E+01,+1.8E-03;0;1"  # one entry in the error queue
    instrument.errors = ['-221,"Settings conflict;interlock open"']
    with pytest.raises(ScpiError, match="interlock open") as caught:
        smu.measure()
    assert caught.value.code == -221
    assert instrument.sent == [MEASURE, "SYST:ERR?", "SYST:ERR?"]


def test_measure_without_a_status_bit_compares_with_the_limit(
    dialect: Dialect, make_instrument
) -> None:
    plain = dataclasses.replace(
        dialect, measure="READ?", measure_fields=("voltage", "current"), compliance_bit=None
    )
    instrument = make_instrument({"READ?": ["+3.0E+00,+5.0E-04", "+2.5E+01,+4.0E-04"]})
    smu = ScpiSmu(CallableTransport(instrument), plain)
    smu.set_current_limit(5e-4)
    assert smu.measure().in_compliance is True
    assert smu.measure().in_compliance is False


def test_driver_waits_itself_when_the_dialect_cannot_settle(
    dialect: Dialect, make_instrument
) -> None:
    waits: list[float] = []
    no_settle = dataclasses.replace(dialect, set_settle=None)
    instrument = make_instrument({MEASURE: "+1.0E+00,+1.0E-03;0;0"})
    smu = ScpiSmu(CallableTransport(instrument), no_settle, sleep=waits.append)
    smu.configure(limit_a=1e-3, nplc=1.0, settle_s=0.05)
    smu.measure()
    assert waits == [0.05]
    assert not any(message.startswith("TRIG:DEL") for message in instrument.sent)


def test_select_channel_then_checks_it_was_accepted(smu: ScpiSmu, instrument) -> None:
    smu.select_channel(3)
    assert instrument.sent == ["ROUT:CLOS (@3)", "SYST:ERR?"]
    instrument.errors = ['-221,"Settings conflict"']
    with pytest.raises(ScpiError, match="ROUT:CLOS"):
        smu.select_channel(4)


@pytest.mark.parametrize("channel", [0, -1, True, 1.0])
def test_select_channel_refuses_non_channels(smu: ScpiSmu, instrument, channel) -> None:
    with pytest.raises(ValueError):
        smu.select_channel(channel)
    assert instrument.sent == []


def test_output_level_and_limit_text(smu: ScpiSmu, instrument) -> None:
    smu.set_voltage(25)
    smu.set_current_limit(0.5e-3)
    smu.output(True)
    smu.output(False)
    smu.open_all_channels()
    assert instrument.sent == [
        "SOUR:VOLT 2.500000E+01",
        "SOUR:CURR:LIM 5.000000E-04",
        "OUTP ON",
        "OUTP OFF",
        "ROUT:OPEN:ALL",
    ]


def test_queries_of_state(smu: ScpiSmu, instrument) -> None:
    instrument.replies.update({"OUTP?": ["1", "0"], "SYST:INT?": "0"})
    assert smu.output_is_on() is True
    assert smu.output_is_on() is False
    assert smu.interlock_closed() is False
    instrument.replies["OUTP?"] = "ON"
    with pytest.raises(ReplyError, match="OUTP"):
        smu.output_is_on()


def test_an_unreadable_interlock_never_counts_as_closed(dialect: Dialect, make_instrument) -> None:
    no_interlock = dataclasses.replace(dialect, interlock_query=None)
    smu = ScpiSmu(CallableTransport(make_instrument()), no_interlock)
    with pytest.raises(DialectError, match="interlock_query"):
        smu.interlock_closed()


def test_identity_is_asked_once(smu: ScpiSmu, instrument) -> None:
    instrument.replies["*IDN?"] = "TEST,SCRIPTED-SMU,0042,1.0 "
    assert smu.identity == "TEST,SCRIPTED-SMU,0042,1.0"
    assert smu.identity == "TEST,SCRIPTED-SMU,0042,1.0"
    assert instrument.sent == ["*IDN?"]


def test_reset_clears_status_and_waits(smu: ScpiSmu, instrument) -> None:
    smu.reset()
    assert instrument.sent == ["*RST", "*CLS", "*OPC?"]


def test_safe_state_switches_off_then_zeroes(smu: ScpiSmu, instrument) -> None:
    assert smu.safe_state() is True
    assert instrument.sent == ["OUTP OFF", "SOUR:VOLT 0.000000E+00"]


def test_safe_state_never_raises_and_tries_every_step(dialect: Dialect, caplog) -> None:
    tried: list[str] = []

    def broken(message: str) -> None:
        tried.append(message)
        raise InstrumentDisconnected("loop", message, "gone")

    smu = ScpiSmu(CallableTransport(broken), dialect)
    with caplog.at_level(logging.WARNING, logger="instruments.smu"):
        assert smu.safe_state() is False
    assert tried == ["OUTP OFF", "SOUR:VOLT 0.000000E+00"]
    assert len(caplog.records) == 2
    assert "output off failed" in caplog.records[0].getMessage()


def test_safe_state_works_while_queries_time_out(dialect: Dialect) -> None:
    # An instrument stuck on queries still takes plain commands: safe state needs no reply.
    sent: list[str] = []
    smu = ScpiSmu(CallableTransport(lambda m: sent.append(m)), dialect)
    with pytest.raises(TimeoutError):
        smu.output_is_on()
    assert smu.safe_state() is True
    assert sent[-2:] == ["OUTP OFF", "SOUR:VOLT 0.000000E+00"]


def test_scripted_instrument_refuses_unscripted_queries(smu: ScpiSmu) -> None:
    with pytest.raises(KeyError):
        smu.measure()
