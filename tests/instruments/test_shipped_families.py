"""Each shipped dialect against a responder of its family (tests/instruments/families.py) over a
real TCP socket through pyvisa-py: the start (stale errors drained, setup sent, output read back
off), a good device's figures, and a short clamped 0.5 % inside the limit caught."""

from __future__ import annotations

import pytest

from instruments.dialect import load_dialect
from instruments.smu import ScpiSmu
from instruments.transport import open_visa
from tests.instruments.families import SenseProtectionSmu, SupplySmu

STALE = '-350,"Queue overflow"'
FAMILIES = {
    "sense_protection_elements": SenseProtectionSmu,
    "supply_separate_queries": SupplySmu,
}


def _session(scripted_server, name: str, ohms: float):
    responder = FAMILIES[name](ohms=ohms, errors=[STALE], single_bit=None)
    responder.output_on = True  # left on by someone before us
    server = scripted_server(responder.respond)
    smu = ScpiSmu(open_visa(server.resource, timeout_s=2.0), load_dialect(name))
    return responder, smu


def _start_and_measure(smu: ScpiSmu, volts: float):
    smu.output(False)
    stale = smu.start_up()
    assert not smu.output_is_on()  # read back OFF (an ON/OFF word where the family sends one)
    smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
    smu.set_voltage(volts)
    smu.output(True)
    reading = smu.measure()
    smu.check_errors()  # nothing the driver sent was refused
    smu.output(False)
    assert not smu.output_is_on()  # a query: the off has reached the responder before close
    return stale, reading


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_a_good_device_reads_its_true_current(scripted_server, name: str) -> None:
    responder, smu = _session(scripted_server, name, ohms=10e3)
    try:
        stale, reading = _start_and_measure(smu, 25.0)
    finally:
        smu.close()
    assert stale == [(-350, "Queue overflow")]  # reported, not raised
    assert reading.voltage_v == pytest.approx(25.0)
    assert reading.current_a == pytest.approx(25.0 / 10e3, rel=1e-4)  # Ohm's law
    assert not reading.in_compliance
    assert not responder.output_on


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_a_short_clamped_inside_the_limit_is_caught(scripted_server, name: str) -> None:
    _, smu = _session(scripted_server, name, ohms=5.0)
    try:
        _, reading = _start_and_measure(smu, 25.0)
    finally:
        smu.close()
    assert reading.current_a == pytest.approx(4.975e-3, rel=1e-4)
    assert reading.in_compliance


def test_the_sense_protection_setup_chooses_the_reading_elements(scripted_server) -> None:
    responder, smu = _session(scripted_server, "sense_protection_elements", ohms=10e3)
    try:
        smu.start_up()
    finally:
        smu.close()
    assert responder.elements == "VOLT,CURR,STAT"
