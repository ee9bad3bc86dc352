"""The driver through pyvisa-py over TCP to the real simulator program (`connect("sim")`)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from instruments import Connection, ScpiSmu, connect, load_dialect
from instruments.errors import InstrumentDisconnected, ScpiError
from instruments.transport import open_visa

pytestmark = pytest.mark.sim

SIMULATOR_MAIN = Path(__file__).resolve().parents[2] / "simulator" / "__main__.py"
SEED = 11
# The default preset without process spread is REFERENCES.md s2's worked JFET source
# (IDSS 10 mA, VP -3 V, lambda 0.01, RS 1 kOhm): I(25 V) = 1.84033 mA [computed, ngspice].
IP_25V_A = 1.84033e-3


@pytest.fixture(scope="module")
def conn():
    if not SIMULATOR_MAIN.exists():
        pytest.skip("the simulator program (simulator/__main__.py) is not there yet")
    options = {"seed": SEED, "defect_rate": 0.0, "spread": 0.0}
    with connect("sim", timeout_s=2.0, sim_options=options) as connection:
        yield connection


@pytest.fixture
def smu(conn: Connection) -> ScpiSmu:
    conn.smu.reset()
    yield conn.smu
    conn.smu.safe_state()


def test_identity_and_resource(conn: Connection) -> None:
    # The wire contract: CCBENCH,SIMULATED-SMU,SIM<seed as 6 digits>,<version>.
    assert conn.identity.startswith(f"CCBENCH,SIMULATED-SMU,SIM{SEED:06d},")
    assert re.fullmatch(r"TCPIP0::127\.0\.0\.1::\d+::SOCKET", conn.resource)


def test_measure_a_regulator_at_25_volts(conn: Connection, smu: ScpiSmu) -> None:
    smu.configure(limit_a=10e-3, nplc=1.0, settle_s=0.0)
    smu.select_channel(1)
    smu.set_voltage(25.0)
    smu.output(True)
    reading = smu.measure()
    assert 1e-3 < reading.current_a < 3e-3  # plausible for the default preset (brief)
    assert reading.current_a == pytest.approx(IP_25V_A, rel=0.01)  # REFERENCES.md s2
    assert reading.voltage_v == pytest.approx(25.0, abs=0.05)
    assert not reading.in_compliance
    assert output_seen_by_another_client(conn) is True
    smu.output(False)
    # A write is not acknowledged; a query on the same link proves the instrument took it,
    # before another client looks (two links are served in no guaranteed order).
    assert smu.output_is_on() is False
    assert output_seen_by_another_client(conn) is False
    smu.check_errors()


def test_a_low_limit_is_flagged_as_compliance(smu: ScpiSmu) -> None:
    smu.configure(limit_a=0.5e-3, nplc=1.0, settle_s=0.0)
    smu.select_channel(1)
    smu.set_voltage(25.0)
    smu.output(True)
    reading = smu.measure()
    assert reading.in_compliance
    # Clamp semantics (wire contract): a current source at the limit...
    assert reading.current_a == pytest.approx(0.5e-3, rel=0.02)
    # ...at the voltage where the device draws it; below saturation, which starts at |VP| = 3 V
    # for any RS (REFERENCES.md s2 [computed]).
    assert 0.0 < reading.voltage_v < 3.0
    smu.output(False)


def test_the_instruments_refusals_become_scpi_errors(smu: ScpiSmu) -> None:
    # Wire contract: a limit outside 1e-9 .. 0.1 A is -222 (SCPI-1999 "Data out of range").
    with pytest.raises(ScpiError) as caught:
        smu.configure(limit_a=1.0, nplc=1.0, settle_s=0.0)
    assert caught.value.code == -222
    smu.check_errors()  # drained: nothing left behind


def test_no_hot_switching(smu: ScpiSmu) -> None:
    smu.configure(limit_a=10e-3, nplc=0.1, settle_s=0.0)
    smu.select_channel(1)
    smu.set_voltage(25.0)
    smu.output(True)
    with pytest.raises(ScpiError) as caught:
        smu.select_channel(2)  # wire contract: -221 with the output on above 1 V
    assert caught.value.code == -221
    assert smu.safe_state() is True
    smu.select_channel(2)


def test_interlock_follows_the_lid(smu: ScpiSmu) -> None:
    # SIMulation:LID is the simulator's own control node (wire contract), not a dialect key.
    try:
        smu.transport.write("SIM:LID OPEN")
        assert smu.interlock_closed() is False
    finally:
        smu.transport.write("SIM:LID CLOS")
    assert smu.interlock_closed() is True


def test_closing_the_connection_stops_the_simulator() -> None:
    if not SIMULATOR_MAIN.exists():
        pytest.skip("the simulator program (simulator/__main__.py) is not there yet")
    with connect("sim", timeout_s=1.0, sim_options={"seed": 2}) as connection:
        resource = connection.resource
    with pytest.raises(InstrumentDisconnected):
        open_visa(resource, timeout_s=0.5)


def output_seen_by_another_client(conn: Connection) -> bool:
    """OUTP? over a second connection: the simulator's clients share one instrument state."""
    other = ScpiSmu(open_visa(conn.resource, timeout_s=2.0), load_dialect("scpi1999"))
    try:
        return other.output_is_on()
    finally:
        other.close()
