"""The simulated chamber against the closed form of a first-order step and scipy's ODE solver."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from simulator.chamber import SENSOR_OPEN_K, Chamber
from simulator.errors import OptionError


class Clock:
    def __init__(self) -> None:
        self.t = 0.0

    def __call__(self) -> float:
        return self.t


def chamber(clock: Clock, **kw) -> Chamber:
    return Chamber(room_k=296.15, tau_air_s=100.0, tau_mount_s=400.0, now=clock, **kw)


def test_air_follows_a_first_order_step():
    clock = Clock()
    c = chamber(clock)
    c.set_point(358.15)
    c.start()
    for t in (50.0, 100.0, 300.0):
        clock.t = t
        # first-order step response, T = S + (T0 - S) e^(-t/tau) (any control-theory textbook)
        assert c.air_reading_k() == pytest.approx(358.15 + (296.15 - 358.15) * math.exp(-t / 100.0))


def test_mount_lags_the_air_as_the_ode_says():
    clock = Clock()
    c = chamber(clock)
    c.set_point(253.15)
    c.start()
    times = [30.0, 200.0, 700.0, 1500.0]
    ours = []
    for t in times:  # readings at uneven steps: the piecewise exact solution must compose
        clock.t = t
        ours.append((c.air_reading_k(), c.mount_k()))

    def rhs(_t, y):
        return [(253.15 - y[0]) / 100.0, (y[0] - y[1]) / 400.0]

    ode = solve_ivp(rhs, (0, times[-1]), [296.15, 296.15], t_eval=times, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(np.array(ours).T, ode.y, rtol=1e-8)  # scipy
    assert ours[1][1] > ours[1][0]  # the mount is slower than the air on the way down


def test_faults_keep_the_chamber_away_from_its_set_point():
    clock = Clock()
    weak = chamber(clock, reach_k=10.0)
    weak.set_fault("weak")
    weak.set_point(358.15)
    weak.start()
    door = chamber(clock)
    door.set_point(358.15)
    door.start()
    door.set_fault("door")
    clock.t = 5000.0
    assert weak.air_reading_k() == pytest.approx(306.15)
    assert door.air_reading_k() == pytest.approx(296.15) and door.door_open
    door.set_fault("sensor-open")
    assert door.air_reading_k() == SENSOR_OPEN_K
    with pytest.raises(OptionError):
        door.set_fault("flooded")
