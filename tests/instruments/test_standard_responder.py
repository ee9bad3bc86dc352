"""The default dialect (scpi1999) against an SMU that knows SCPI-1999 and nothing else
(tests/instruments/standardsmu.py), over a real TCP socket through pyvisa-py: single readings and
source lists, a regulator's current equal to the textbook's, a short clamping inside its limit
caught in both."""

from __future__ import annotations

import numpy as np
import pytest

from instruments.dialect import load_dialect
from instruments.smu import ScpiSmu
from instruments.transport import open_visa
from tests.instruments.linkserver import serving
from tests.instruments.standardsmu import Regulator, Resistor, StandardSmu

LEVELS = [0.0, 2.0, 5.0, 10.0, 25.0]


def _started(server) -> ScpiSmu:
    smu = ScpiSmu(open_visa(server.resource, timeout_s=2.0), load_dialect("scpi1999"))
    smu.output(False)
    smu.start_up()
    assert not smu.output_is_on()
    return smu


def _list(responder: StandardSmu) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str]]:
    with serving(responder.respond) as server:
        smu = _started(server)
        try:
            smu.output(True)
            sweep = smu.list_sweep(LEVELS, limit_a=5e-3, nplc=1, settle_s=1e-3)
            smu.check_errors()  # nothing the dialect sent was refused
        finally:
            smu.safe_state()
            smu.close()
        return (*sweep, server.received)


def test_a_list_runs_on_a_standard_instrument() -> None:
    device = Regulator()
    voltage, current, limited = _list(StandardSmu(devices={1: device}))[:3]
    np.testing.assert_allclose(voltage, LEVELS, rtol=1e-6)
    # the textbook curve of the same device (tests/support/textbook.py)
    np.testing.assert_allclose(current, [device.current(v) for v in LEVELS], rtol=1e-6)
    assert not limited.any()


def test_a_short_clamping_inside_its_limit_is_caught_in_a_list() -> None:
    current, limited = _list(StandardSmu(devices={1: Resistor(5.0)}))[1:3]
    assert list(limited) == [False, True, True, True, True]  # 2 V / 5 ohm is above 5 mA
    assert current[1:] == pytest.approx(5e-3 * 0.995)


def test_the_default_dialect_sends_no_node_outside_scpi_1999() -> None:
    received = _list(StandardSmu())[3]
    assert not any("FIEL" in message for message in received)


def test_a_single_reading_on_a_standard_instrument() -> None:
    device = Regulator()
    with serving(StandardSmu(devices={1: device}).respond) as server:
        smu = _started(server)
        try:
            smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
            smu.set_voltage(25.0)
            smu.output(True)
            reading = smu.measure()
        finally:
            smu.safe_state()
            smu.close()
    assert reading.current_a == pytest.approx(device.current(25.0), rel=1e-6)
    assert not reading.in_compliance


def test_a_clamp_below_the_clamp_fraction_is_refused_by_the_latched_event() -> None:
    # a source clamping 5 % inside its limit (a poor limit accuracy): 2 % of room is not enough
    from instruments.errors import InstrumentError

    responder = StandardSmu(devices={1: Resistor(5.0)}, clamp_low=0.05)
    with pytest.raises(InstrumentError, match=r"latched its current limit \(status event bit 1\)"):
        _list(responder)


def test_without_the_event_check_that_clamp_would_pass_as_data() -> None:
    # what the check is for: the same list, the check left out, stores clamped readings as data
    import dataclasses

    responder = StandardSmu(devices={1: Resistor(5.0)}, clamp_low=0.05)
    dialect = dataclasses.replace(load_dialect("scpi1999"), list_clamp_event=None)
    with serving(responder.respond) as server:
        smu = ScpiSmu(open_visa(server.resource, timeout_s=2.0), dialect)
        try:
            smu.output(True)
            _, current, limited = smu.list_sweep(LEVELS, limit_a=5e-3, nplc=1, settle_s=0)
        finally:
            smu.safe_state()
            smu.close()
    assert current[-1] == pytest.approx(4.75e-3) and not limited.any()
