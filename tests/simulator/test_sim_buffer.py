"""Source lists, the reading buffer and the data formats, in process (virtual clock)."""

from __future__ import annotations

import numpy as np
import pytest

from simulator import Session, SimOptions, build_instrument
from simulator.devices import TNOM_K
from simulator.faults import parse_fault
from simulator.instrument import Instrument
from tests.simulator.conftest import errors

LEVELS = (0.0, 5.0, 10.0, 25.0)
LIST_SETUP = (
    "ROUT:CLOS (@1);:CURR:LIM 10 MA;:OUTP ON;:SOUR:VOLT:MODE LIST;"
    ":SOUR:LIST:VOLT 0,5,10,25;:TRIG:COUN 4"
)


@pytest.fixture
def exact() -> Session:
    """Devices without process spread: each is the FLC-1.8 preset itself."""
    return Session(build_instrument(SimOptions(clock="virtual", devices=3, spread=0.0)))


def numbers(reply: str) -> np.ndarray:
    return np.array([float(x) for x in reply.split(",")])


def device_current(session: Session, volts) -> np.ndarray:
    return session.instrument.lot.at(1).device.current(np.asarray(volts), TNOM_K)


def test_list_runs_one_acquisition_per_level_and_fetch_returns_them(exact: Session):
    exact.handle(LIST_SETUP)
    assert exact.handle("VOLT:MODE?;:LIST:VOLT:POIN?;:TRIG:COUN?") == "LIST;4;4"
    assert exact.handle("INIT") is None
    v, i = numbers(exact.handle("FETC?")).reshape(-1, 2).T
    np.testing.assert_allclose(v, LEVELS, atol=5 * 50e-6)  # 5 sigma of the voltage noise
    np.testing.assert_allclose(i, device_current(exact, LEVELS), rtol=1e-4, atol=1e-7)
    assert exact.handle("FETC?") == exact.handle("FETC?")  # fetch reads, never acquires
    assert exact.instrument.smu.applied_levels[-4:] == list(LEVELS)
    assert float(exact.handle("SOUR:VOLT?")) == 25.0  # the output stays at the last level


def test_read_is_init_then_fetch_and_the_count_wraps_round_the_list(exact: Session):
    exact.handle(LIST_SETUP + ";:TRIG:COUN 6")
    v = numbers(exact.handle("READ?"))[0::2]
    np.testing.assert_allclose(v, [0, 5, 10, 25, 0, 5], atol=5 * 50e-6)


def test_fixed_mode_takes_count_readings_at_the_level(exact: Session):
    exact.handle("ROUT:CLOS (@1);:VOLT 12;:CURR:LIM 10 MA;:OUTP ON;:TRIG:COUN 3")
    v, i = numbers(exact.handle("READ?")).reshape(-1, 2).T
    np.testing.assert_allclose(v, 12.0, atol=5 * 50e-6)
    assert len(set(i)) > 1  # three acquisitions, three noise draws


def test_a_change_makes_the_buffer_stale(exact: Session):
    exact.handle(LIST_SETUP + ";:INIT")
    exact.handle("SOUR:VOLT 3")
    assert exact.handle("FETC?") is None
    assert errors(exact) == [-230]


def test_fields_add_the_compliance_status_of_each_reading(exact: Session):
    exact.handle(LIST_SETUP + ";:CURR:LIM 1.8 MA;:FORM:FIEL VOLT,CURR,STAT")
    readings = numbers(exact.handle("READ?")).reshape(-1, 3)
    assert list(readings[:, 2]) == [0, 0, 0, 2]  # QUES bit 1 where the 1.8 mA limit clamps
    assert 10 < readings[3, 0] < 25  # clamped: the voltage where the device draws the limit
    assert exact.handle("FORM:FIEL?") == "VOLT,CURR,STAT"


@pytest.mark.parametrize(("order", "dtype"), [("NORM", ">f4"), ("SWAP", "<f4")])
def test_real32_is_one_definite_block_in_the_stated_byte_order(exact: Session, order, dtype):
    exact.handle(LIST_SETUP + ";:CURR:LIM 1.8 MA;:FORM:FIEL VOLT,CURR,STAT")
    ascii_values = numbers(exact.handle("READ?"))
    exact.handle(f"FORM REAL,32;:FORM:BORD {order}")
    raw = exact.handle("FETC?").encode("latin-1")
    assert raw[:4] == b"#248"  # IEEE 488.2 definite length: 2 digits, 48 bytes = 12 floats
    values = np.frombuffer(raw[4:], dtype)
    np.testing.assert_allclose(values, ascii_values, rtol=1e-6)  # float32 of the same readings
    # SCPI-1999 FORMat:BORDer: NORMal sends the most significant byte first [from memory,
    # SCPI.md s3.6]; IEEE 754 float32 2.0 is 0x40000000. The last field is that status.
    two = b"\x40\x00\x00\x00"
    assert raw[-4:] == (two if order == "NORM" else two[::-1])


def test_format_queries_errors_and_reset(exact: Session):
    exact.handle("FORM REAL,32;:FORM:BORD SWAP;:VOLT:MODE LIST;:LIST:VOLT 1,2;:TRIG:COUN 2")
    assert exact.handle("FORM?;:FORM:BORD?") == "REAL,32;SWAP"
    exact.handle("FORM REAL,64")
    exact.handle("FORM:FIEL VOLT,VOLT")
    exact.handle("LIST:VOLT 1,500")
    assert errors(exact) == [-224, -224, -222]
    exact.handle("*RST")
    assert exact.handle("FORM?;:FORM:BORD?;:VOLT:MODE?;:TRIG:COUN?;:LIST:VOLT:POIN?") == (
        "ASC;NORM;FIX;1;0"
    )


def test_too_long_a_list_is_refused(exact: Session):
    exact.handle("LIST:VOLT " + ",".join(["1"] * 10_001))
    assert errors(exact) == [-223]


def test_an_empty_list_or_a_hazardous_one_behind_an_open_lid_is_refused(exact: Session):
    exact.handle("VOLT:MODE LIST;:INIT")
    exact.handle("LIST:VOLT 10,45;:SIM:LID OPEN;:INIT")
    assert errors(exact) == [-221, -221]
    assert exact.instrument.smu.applied_levels == []


def test_list_time_is_delay_plus_aperture_per_point(exact: Session):
    exact.handle(LIST_SETUP + ";:TRIG:DEL 0.01;:SENS:CURR:NPLC 2")
    before = exact.instrument.clock.busy_s
    exact.handle("INIT")
    spent = exact.instrument.clock.busy_s - before
    assert spent == pytest.approx(4 * (0.01 + 2 / 50) + 50e-6, abs=1e-12)  # one message unit


def test_a_device_failing_mid_list_shows_in_the_readings_after_it():
    inst: Instrument = build_instrument(
        SimOptions(
            clock="virtual", devices=2, faults=(parse_fault("device-open:on=point,after=2"),)
        )
    )
    s = Session(inst)
    s.handle(LIST_SETUP)
    i = numbers(s.handle("READ?"))[1::2]
    assert i[1] > 1e-3 and abs(i[3]) < 1e-9  # the third acquisition onwards sees an open


def test_a_list_solved_in_one_go_reads_as_solved_point_by_point():
    def run(*faults: str) -> np.ndarray:
        options = SimOptions(clock="virtual", devices=2, faults=tuple(map(parse_fault, faults)))
        s = Session(build_instrument(options))
        s.handle(LIST_SETUP.replace("0,5,10,25", ",".join(f"{v:g}" for v in range(-1, 40))))
        s.handle("TRIG:COUN 41;:CURR:LIM 1.8 MA")
        return numbers(s.handle("READ?")).reshape(-1, 2)

    fast = run()
    slow = run("device-open:on=point,channel=2")  # a fault waiting for points: one by one
    # the same noise draws in the same order; at most one step of resolution apart
    np.testing.assert_allclose(fast[:, 0], slow[:, 0], atol=1.01e-5)  # 10 uV
    np.testing.assert_allclose(fast[:, 1], slow[:, 1], atol=1.01e-6 * 1e-2)  # 1 ppm of 10 mA
