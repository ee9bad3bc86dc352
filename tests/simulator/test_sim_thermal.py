"""Ambient temperature and self-heating, seen through SCPI on the virtual clock."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simulator import Session, SimOptions, build_instrument
from simulator.presets import preset
from simulator.thermal import Thermal, celsius_to_kelvin

RTH, TAU = 200.0, 1.0  # K/W, s: invented, of the order of a small glass package [from memory]


def session(**options) -> Session:
    return Session(build_instrument(SimOptions(clock="virtual", devices=2, spread=0.0, **options)))


def current_at(s: Session, volts: float = 25.0) -> float:
    return float(s.handle(f"SOUR:VOLT {volts};:READ?").split(",")[1])


def test_ambient_temperature_moves_the_current_by_the_preset_laws():
    s = session()
    s.handle("ROUT:CLOS (@1);:CURR:LIM 10 MA;:OUTP ON;:SENS:CURR:NPLC 10")
    device = preset("FLC-1.8").device()
    for celsius in (-20.0, 27.0, 85.0):
        s.handle(f"SIM:TEMP {celsius}")
        assert float(s.handle("SIM:TEMP?")) == celsius
        assert float(s.handle("SIM:TEMP:JUNC?")) == pytest.approx(celsius)  # no self-heating
        expected = float(device.current(25.0, celsius_to_kelvin(celsius)))
        assert current_at(s) == pytest.approx(expected, abs=4e-8)  # 5 sigma of 0.8 ppm of 10 mA
    cold, hot = (float(device.current(25.0, celsius_to_kelvin(c))) for c in (-20.0, 85.0))
    assert hot < cold  # this preset's regulated current falls with temperature


def test_ambient_from_the_command_line_option():
    s = session(temperature=85.0)
    assert float(s.handle("SIM:TEMP?")) == 85.0
    s.handle("SIM:TEMP 200")
    assert s.handle("SYST:ERR?").startswith("-222")


def test_junction_warms_by_the_first_order_law_then_settles_at_p_times_rth():
    s = session(thermal_resistance=RTH, thermal_time=TAU)
    s.handle("ROUT:CLOS (@1);:CURR:LIM 10 MA;:SENS:CURR:NPLC 1;:SOUR:VOLT 25;:OUTP ON")
    power = 25.0 * float(preset("FLC-1.8").device().current(25.0))  # at 27 C when switched on
    s.handle("TRIG:DEL 0.48")
    s.handle("READ?")  # 0.48 s delay + 20 ms aperture (+ 3 units of 50 us)
    elapsed = 0.5 + 3 * 50e-6
    rise = float(s.handle("SIM:TEMP:JUNC?")) - 27.0
    # T = T_amb + P Rth (1 - exp(-t / tau)) [closed form, first-order step]
    assert rise == pytest.approx(power * RTH * (1 - math.exp(-elapsed / TAU)), abs=0.01)
    for _ in range(20):  # 10 s more: ten time constants
        s.handle("READ?")
    settled = float(s.handle("SIM:TEMP:JUNC?"))
    # steady state: T = T_amb + 25 V x I(25 V, T) x Rth, the fixed point [computed]
    device = preset("FLC-1.8").device()
    fixed = 27.0
    for _ in range(50):
        fixed = 27.0 + 25.0 * float(device.current(25.0, celsius_to_kelvin(fixed))) * RTH
    assert settled == pytest.approx(fixed, abs=0.01)
    assert current_at(s) == pytest.approx(
        float(device.current(25.0, celsius_to_kelvin(settled))), rel=1e-4
    )


def test_a_junction_cools_back_to_the_ambient_when_its_power_goes():
    s = session(thermal_resistance=RTH, thermal_time=TAU)
    s.handle("ROUT:CLOS (@1);:CURR:LIM 10 MA;:SOUR:VOLT 25;:OUTP ON;:TRIG:DEL 5;:READ?")
    hot = float(s.handle("SIM:TEMP:JUNC?"))
    assert hot > 30.0
    s.handle("OUTP OFF;:SOUR:VOLT 0;:ROUT:CLOS (@2);:OUTP ON;:READ?")  # 5 s on the other one
    assert float(s.handle("SIM:TEMP:JUNC?")) == pytest.approx(27.0, abs=1e-6)  # never heated
    s.handle("OUTP OFF;:ROUT:CLOS (@1)")
    cooled = float(s.handle("SIM:TEMP:JUNC?")) - 27.0
    assert cooled == pytest.approx((hot - 27.0) * math.exp(-5.02 / TAU), rel=0.01)


def test_thermal_model_without_resistance_is_the_ambient_everywhere():
    thermal = Thermal(300.0, now=lambda: 5.0)
    thermal.set_power(1, 1.0)
    assert thermal.temperature(1) == 300.0 and not thermal.heating
    assert np.isclose(Thermal(300.0, 100.0, 2.0, now=lambda: 1e9).temperature(None), 300.0)
