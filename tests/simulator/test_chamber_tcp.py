"""The simulated chamber as a child process on its own TCP port, through pyvisa-py and the driver:
its step response against the first-order closed form, its refusals and its faults."""

from __future__ import annotations

import math

import pytest

from instruments.chamberlink import ChamberConnection, connect_chamber
from instruments.errors import InstrumentError, InstrumentTimeout, ScpiError, SensorFault

TAU_AIR, TAU_MOUNT, ROOM = 100.0, 400.0, 23.0


def state(link: ChamberConnection) -> tuple[float, float, float]:
    t, air, mount = (float(x) for x in link.chamber.transport.query("SIM:STATE?").split(","))
    return t, air, mount


def later_state(link: ChamberConnection, after_s: float) -> tuple[float, float, float]:
    """The first state at least `after_s` simulated seconds on (bounded: never hangs)."""
    start = state(link)[0]
    for _ in range(10_000):
        now = state(link)
        if now[0] >= start + after_s:
            return now
    raise AssertionError("the simulated clock did not move")


@pytest.fixture
def link():
    options = {"speed": 2000, "tau_air": TAU_AIR, "tau_mount": TAU_MOUNT, "room": ROOM}
    with connect_chamber("sim", sim_options=options) as opened:
        yield opened


def test_air_follows_the_first_order_closed_form_between_two_readings(link):
    chamber = link.chamber
    assert "SIMULATED-CHAMBER" in chamber.identify()
    assert chamber.set_point(85.0) == pytest.approx(85.0)
    chamber.start()
    t1, a1, m1 = later_state(link, 20.0)
    t2, a2, m2 = later_state(link, 60.0)
    dt = t2 - t1
    # first-order step from a known state: A2 = S + (A1 - S) e^(-dt/tau) (control-theory textbook)
    assert a2 == pytest.approx(85.0 + (a1 - 85.0) * math.exp(-dt / TAU_AIR), abs=1e-6)
    # second lag in series, exact for a held set point (solved in simulator/chamber.py docstring;
    # tests/simulator/test_chamber.py checks that solution against scipy's ODE solver)
    ea, em = math.exp(-dt / TAU_AIR), math.exp(-dt / TAU_MOUNT)
    ratio = TAU_AIR / (TAU_AIR - TAU_MOUNT)
    mount = 85.0 + (m1 - 85.0) * em + (a1 - 85.0) * ratio * (ea - em)
    assert m2 == pytest.approx(mount, abs=1e-6)
    assert m2 < a2 < 85.0  # on the way up the mount trails the air
    assert chamber.temperature() > a2 and chamber.fixture_temperature() > m2


def test_a_set_point_beyond_the_chamber_is_refused_and_the_old_one_kept(link):
    with pytest.raises(ScpiError, match="-222"):
        link.chamber.set_point(400.0)
    assert link.chamber.read_set_point() == pytest.approx(ROOM)


def test_faults_door_weak_sensor_and_silence(link):
    chamber, send = link.chamber, link.chamber.transport.write
    chamber.set_point(150.0)
    chamber.start()
    send("SIM:FAULT weak,1")
    _, air, _ = later_state(link, 1000.0)  # ten air lags on
    assert air <= ROOM + 20.0 + 1e-6 and air == pytest.approx(ROOM + 20.0, abs=0.01)
    send("SIM:FAULT door,1")
    assert chamber.door_open() is True
    _, air, _ = later_state(link, 1000.0)
    assert air == pytest.approx(ROOM, abs=0.01)  # door open: the air relaxes to the room
    send("SIM:FAULT sensor-open,1")
    with pytest.raises(SensorFault):
        chamber.temperature()
    send("SIM:FAULT mute,1")
    chamber.transport.timeout_s = 0.3
    with pytest.raises(InstrumentTimeout):
        chamber.temperature()


def test_an_unknown_chamber_option_is_refused_before_anything_starts():
    with pytest.raises(InstrumentError, match="unknown chamber option 'sped'"):
        connect_chamber("sim", sim_options={"sped": 10})
    with pytest.raises(InstrumentError, match="only"):
        connect_chamber("TCPIP0::127.0.0.1::1::SOCKET", sim_options={"speed": 10})
