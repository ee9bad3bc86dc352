"""Device models against closed forms and the ngspice figures of REFERENCES.md s2 and s3."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simulator.devices import (
    TNOM_K,
    Diode,
    JfetParams,
    JfetRegulator,
    Resistor,
    Series,
    open_circuit,
    regulator,
    self_bias_current,
    short_circuit,
)
from simulator.errors import ModelError

IDSS, VP = 10e-3, -3.0


def jfet(rs: float, lam: float = 0.0, **extra: float) -> JfetRegulator:
    return JfetRegulator(JfetParams(IDSS, VP, lam, rs, **extra))


def closed_form_id(rs: float) -> float:
    # REFERENCES.md s2: self-bias, lambda = 0, k = IDSS RS / |VP| [closed form]
    k = IDSS * rs / abs(VP)
    return 2 * IDSS / ((2 * k + 1) + math.sqrt(4 * k + 1))


def closed_form_vl(rs: float, il: float) -> float:
    # REFERENCES.md s2: VL = IL RS + g - sqrt(g^2 - IL/BETA), g = |VP| - IL RS, lambda = 0
    beta = IDSS / VP**2
    g = abs(VP) - il * rs
    return il * rs + g - math.sqrt(g * g - il / beta)


@pytest.mark.reference
@pytest.mark.parametrize(("rs", "table_ma"), [(0.0, 10.0000), (470.0, 2.9287), (1000.0, 1.7463)])
def test_self_bias_current_matches_closed_form_and_table(rs, table_ma):
    current = float(jfet(rs).current(10.0))
    assert current == pytest.approx(closed_form_id(rs), rel=1e-9)  # REFERENCES.md s2 [closed form]
    assert current * 1e3 == pytest.approx(table_ma, abs=5e-5)  # REFERENCES.md s2 table [computed]


@pytest.mark.reference
@pytest.mark.parametrize(("rs", "table_v"), [(0.0, 1.65836), (470.0, 1.77654), (1000.0, 1.85455)])
def test_limiting_voltage_at_080_ip(rs, table_v):
    il = 0.8 * closed_form_id(rs)
    vl = float(jfet(rs).voltage_at(il, 25.0))
    assert vl == pytest.approx(closed_form_vl(rs, il), abs=1e-7)  # REFERENCES.md s2 [closed form]
    assert vl == pytest.approx(table_v, abs=5e-6)  # REFERENCES.md s2 table [computed]


@pytest.mark.reference
@pytest.mark.parametrize("rs", [0.0, 470.0, 1000.0])
def test_saturation_begins_at_pinch_off_voltage_for_any_rs(rs):
    # REFERENCES.md s2: "Saturation begins at V = |VP| for any RS" [computed]; lambda = 0
    device, flat = jfet(rs), closed_form_id(rs)
    assert float(device.current(abs(VP))) == pytest.approx(flat, rel=1e-9)
    assert float(device.current(abs(VP) + 5.0)) == pytest.approx(flat, rel=1e-9)
    assert float(device.current(abs(VP) - 0.1)) < flat * (1 - 1e-4)


@pytest.mark.reference
def test_current_and_dynamic_impedance_at_25_v_with_lambda():
    device = jfet(1000.0, lam=0.01)
    current, slope = device.current_slope(25.0)
    assert float(current) * 1e3 == pytest.approx(1.84033, abs=5e-6)  # REFERENCES.md s2 [ngspice]
    assert 1 / float(slope) / 1e3 == pytest.approx(280.3, abs=0.05)  # REFERENCES.md s2 ZT [ngspice]


@pytest.mark.reference
def test_degenerated_output_resistance_formula():
    # REFERENCES.md s2: ro = (1 + lambda VDS)/(lambda ID); rout = ro (1 + gm RS) + RS [SPICE form]
    rs, lam, v = 1000.0, 0.01, 25.0
    device = jfet(rs, lam)
    current, slope = (float(x) for x in device.current_slope(v))
    vds = v - current * rs
    gm = 2 / abs(VP) * math.sqrt(current * IDSS * (1 + lam * vds))  # gm with the lambda factor
    ro = (1 + lam * vds) / (lam * current)
    assert 1 / slope == pytest.approx(ro * (1 + gm * rs) + rs, rel=1e-3)


@pytest.mark.reference
def test_slope_agrees_with_numeric_derivative_in_every_region():
    device = jfet(1000.0, lam=0.01)
    v = np.array([-0.75, -0.2, 0.3, 1.5, 2.9, 4.0, 60.0])
    h = 1e-6
    numeric = (device.current(v + h) - device.current(v - h)) / (2 * h)
    assert np.allclose(device.current_slope(v)[1], numeric, rtol=1e-4)  # common practice


@pytest.mark.reference
def test_diode_forward_voltage_at_1_ma():
    # REFERENCES.md s3: IS 1e-14, n 1, 27 C: 0.65512 V at 1 mA, 59.6 mV per decade [computed]
    diode = Diode(1e-14)
    assert float(diode.voltage_at(1e-3, 5.0)) == pytest.approx(0.65512, abs=5e-6)
    decade = float(diode.voltage_at(1e-2, 5.0) - diode.voltage_at(1e-3, 5.0))
    assert decade * 1e3 == pytest.approx(59.6, abs=0.05)


@pytest.mark.reference
def test_reverse_biased_regulator_conducts_like_a_diode():
    # REFERENCES.md s3: -6.4 mA at -0.7 V, -272 mA at -0.8 V with RS 1k, IS 1e-14 [ngspice]
    device = jfet(1000.0, lam=0.01)
    assert float(device.current(-0.7)) * 1e3 == pytest.approx(-6.4, abs=0.05)
    assert float(device.current(-0.8)) * 1e3 == pytest.approx(-272, abs=0.5)
    # REFERENCES.md s1/s3: about 0.65 to 0.7 V at 1 mA reverse, like a forward diode [src]
    assert -0.70 < float(device.voltage_at(-1e-3, -5.0)) < -0.60


@pytest.mark.reference
def test_series_blocking_diode_blocks_reverse_and_shifts_vl():
    params = JfetParams(IDSS, VP, 0.01, 1000.0)
    bare, blocked = JfetRegulator(params), regulator(params, Diode(1e-14))
    assert abs(float(blocked.current(-25.0))) <= 1.01e-14  # only the diode's IS flows
    shift = float(blocked.voltage_at(1.5e-3, 25.0) - bare.voltage_at(1.5e-3, 25.0))
    assert shift == pytest.approx(0.67, abs=0.01)  # REFERENCES.md s3 [computed]
    i_blocked = float(blocked.current(25.0))
    assert float(bare.current(25.0 - float(Diode().voltage_at(i_blocked, 25.0)))) == pytest.approx(
        i_blocked, rel=1e-9
    )  # Kirchhoff: one current through both


def test_temperature_laws_shift_vto_and_beta():
    # REFERENCES.md s3: VTO(T) = VTO - TCV (T - TNOM), BETA(T) = BETA (T/TNOM)^BEX [src ngspice]
    p = JfetParams(IDSS, VP, tcv_v_per_k=-2.5e-3, bex=-0.5)
    vto, beta = p.at(TNOM_K + 40)
    assert vto == pytest.approx(VP + 2.5e-3 * 40)
    assert beta == pytest.approx(p.beta * ((TNOM_K + 40) / TNOM_K) ** -0.5)
    hot = JfetRegulator(p).current(10.0, temp_k=TNOM_K + 40)
    assert float(hot) == pytest.approx(beta * vto**2, rel=1e-9)  # RS 0, lambda 0: IDSS(T)


def test_models_are_vectorised_monotone_and_never_overflow():
    v = np.linspace(-200, 200, 4001)
    with np.errstate(all="raise"):
        for device in (jfet(1000.0, 0.01), regulator(JfetParams(IDSS, VP), Diode()), Diode()):
            current = device.current(v)
            assert current.shape == v.shape and np.all(np.isfinite(current))
            assert np.all(np.diff(current) >= 0)


def test_voltage_at_inverts_current_within_the_bound():
    device = jfet(1000.0, 0.01)
    targets = np.array([-5e-3, -1e-4, 1e-6, 1e-3, 1.8e-3])
    bounds = np.where(targets < 0, -10.0, 40.0)
    v = device.voltage_at(targets, bounds)
    assert np.allclose(device.current(v), targets, rtol=1e-8)
    assert np.all(np.abs(v) <= np.abs(bounds))
    # a target the device never reaches inside the bound gives the bound itself
    assert float(device.voltage_at(5e-3, 25.0)) == pytest.approx(25.0)


def test_open_short_and_resistor():
    assert float(short_circuit().current(1.0)) == pytest.approx(2.0)  # 0.5 ohm
    assert abs(float(open_circuit().current(100.0))) < 1e-9
    r = Resistor(1000.0)
    assert float(r.voltage_at(2e-3, 10.0)) == pytest.approx(2.0)
    assert float(Series(r, r).current(4.0)) == pytest.approx(2e-3)


def test_unphysical_parameters_are_refused():
    with pytest.raises(ModelError, match="VTO < 0"):
        JfetParams(IDSS, 1.0)
    with pytest.raises(ValueError, match="RS >= 0"):
        JfetParams(IDSS, VP, rs_ohm=-1.0)


def test_self_bias_current_helper_matches_solver():
    p = JfetParams(IDSS, VP, 0.0, 470.0)
    assert self_bias_current(p) == pytest.approx(float(JfetRegulator(p).current(20.0)), rel=1e-9)
