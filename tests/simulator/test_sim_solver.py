"""The device solves against scipy.optimize.brentq on the circuit equations, and the fast paths
(one operating point in floats, a whole list at once) against the slow ones they replace.

The reference equations below are written from the SPICE level-1 (Shichman-Hodges) JFET and
the Shockley diode as the ngspice manual states them (JFET level 1 and diode model sections,
from memory), with the SPICE temperature laws, apart from simulator/devices.py so that a slip
in one is not repeated in the other; brentq [computed, scipy.optimize.brentq] solves them to
the last bits (xtol 1e-30 V, as some roots lie near 0 V; rtol 4 eps). The simulator's solver
stops once a Newton step is below 1e-13 V + 1e-12 x |V|, so its currents must agree to about
1e-12 relative (measured: 2e-15 at worst).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from simulator import Session, SimOptions, build_instrument
from simulator.clock import VirtualClock
from simulator.devices import TNOM_K, Diode, JfetParams
from simulator.lot import make_lot
from simulator.presets import preset
from simulator.smu_model import Smu
from simulator.solve import solve_increasing, solve_point
from simulator.thermal import celsius_to_kelvin

K_OVER_Q = 1.380649e-23 / 1.602176634e-19  # V/K, SI 2019 exact constants
EG_EV, XTI = 1.11, 3.0
RTOL = 1e-12  # the solver's own relative tolerance
BRENT = {"xtol": 1e-30, "rtol": 4 * np.finfo(float).eps, "maxiter": 500}
FORWARD = (0.0, 0.05, 0.5, 1.0, 1.9, 2.5, 2.99, 3.0, 3.2, 4.0, 6.0, 12.0, 25.0, 33.3, 40.0)
REVERSE = (-0.8, -0.6, -0.3, -0.05)


def is_at(is_a: float, temp_k: float, n: float = 1.0) -> float:
    # SPICE: IS(T) = IS exp((T/TNOM - 1) EG / (N Vt)) (T/TNOM)^(XTI/N)
    ratio = temp_k / TNOM_K
    return is_a * math.exp((ratio - 1) * EG_EV / (n * K_OVER_Q * temp_k)) * ratio ** (XTI / n)


def diode(v: float, is_t: float, n_vt: float) -> float:
    # the cap only keeps brentq's far bracket ends finite; every root lies far below it
    return is_t * math.expm1(min(v / n_vt, 700.0))


def channel(vgs: float, vgd: float, vto: float, beta: float, lam: float) -> float:
    """Level-1 drain-to-source current, normal mode (VDS >= 0) or inverse (source and drain
    swap roles)."""
    vds = vgs - vgd
    vov, x, sign = (vgs - vto, vds, 1.0) if vds >= 0 else (vgd - vto, -vds, -1.0)
    if vov <= 0:
        return 0.0
    if x >= vov:
        return sign * beta * (1 + lam * x) * vov**2
    return sign * beta * (1 + lam * x) * x * (2 * vov - x)


def regulator_current(p: JfetParams, v: float, temp_k: float) -> float:
    """Drain = anode, gate = cathode, source through RS to the cathode: KCL at the source."""
    vto = p.vto_v - p.tcv_v_per_k * (temp_k - TNOM_K)
    beta = p.idss_a / p.vto_v**2 * (temp_k / TNOM_K) ** p.bex
    vt, is_t = K_OVER_Q * temp_k, is_at(p.is_a, temp_k)
    if v == 0:
        return 0.0

    def kcl(vs: float) -> float:  # out through RS minus in from channel and gate-source diode
        return vs / p.rs_ohm - channel(-vs, -v, vto, beta, p.lambda_per_v) - diode(-vs, is_t, vt)

    vs = brentq(kcl, min(v, 0.0), max(v, 0.0), **BRENT)
    return channel(-vs, -v, vto, beta, p.lambda_per_v) - diode(-v, is_t, vt)


def blocked_current(p: JfetParams, d: Diode, v: float, temp_k: float) -> float:
    """The regulator behind a series diode: the voltage across the regulator that both carry."""
    if v == 0:
        return 0.0
    is_d, n_vt = is_at(d.is_a, temp_k, d.n), d.n * K_OVER_Q * temp_k

    def imbalance(v2: float) -> float:
        return regulator_current(p, v2, temp_k) - diode(v - v2, is_d, n_vt)

    return regulator_current(p, brentq(imbalance, min(v, 0.0), max(v, 0.0), **BRENT), temp_k)


def close(ours: float, reference: float, rtol: float = RTOL, atol: float = 1e-20) -> bool:
    return abs(ours - reference) <= rtol * abs(reference) + atol


@pytest.mark.reference
@pytest.mark.parametrize("temp_c", [-20.0, 27.0, 85.0])
@pytest.mark.parametrize("name", ["FLC-0.2", "FLC-1.8", "FLC-4.7"])
def test_regulator_current_agrees_with_brentq_on_the_circuit(name, temp_c):
    chosen = preset(name)
    device, temp_k = chosen.device(), celsius_to_kelvin(temp_c)
    volts = REVERSE + FORWARD
    reference = [regulator_current(chosen.params, v, temp_k) for v in volts]
    arrays = device.current(np.array(volts), temp_k)
    for v, ref, array in zip(volts, reference, arrays, strict=True):
        point = device.point_current(v, temp_k)
        assert close(point, ref), (v, point, ref)  # [computed, scipy.optimize.brentq]
        assert close(float(array), ref), (v, array, ref)


@pytest.mark.reference
@pytest.mark.parametrize("temp_c", [27.0, 85.0])
def test_blocked_regulator_agrees_with_brentq_on_the_circuit(temp_c):
    chosen = preset("FLC-1.8B")
    assert chosen.diode is not None
    device, temp_k = chosen.device(), celsius_to_kelvin(temp_c)
    volts = (-30.0, -1.0, *FORWARD)
    arrays = device.current(np.array(volts), temp_k)
    for v, array in zip(volts, arrays, strict=True):
        ref = blocked_current(chosen.params, chosen.diode, v, temp_k)
        # reverse: only the diode's IS flows, and the regulator's reverse drop is a few kT/q
        atol = 1e-20 if v >= 0 else 1e-26
        assert close(device.point_current(v, temp_k), ref, atol=atol), v  # [computed, brentq]
        assert close(float(array), ref, atol=atol), v


@pytest.mark.reference
@pytest.mark.parametrize(
    ("name", "target", "bound"),
    [("FLC-1.8", 0.2e-3, 25.0), ("FLC-1.8", 1.4e-3, 25.0), ("FLC-1.8", 1.7e-3, 40.0),
     ("FLC-0.2", 0.15e-3, 10.0), ("FLC-1.8", -1e-3, -5.0), ("FLC-1.8B", 1.4e-3, 25.0)],
)  # fmt: skip
def test_compliance_voltage_agrees_with_brentq(name, target, bound):
    chosen = preset(name)
    device = chosen.device()

    def current(v: float) -> float:
        if chosen.diode is None:
            return regulator_current(chosen.params, v, TNOM_K)
        return blocked_current(chosen.params, chosen.diode, v, TNOM_K)

    ref = brentq(lambda v: current(v) - target, min(bound, 0.0), max(bound, 0.0), **BRENT)
    # voltage_at stops at a step below 1e-12 V: within that of the root [computed, brentq]
    assert abs(device.point_voltage_at(target, bound) - ref) <= 2e-12
    assert abs(float(device.voltage_at(target, bound)) - ref) <= 2e-12


@pytest.mark.reference
def test_solve_point_takes_the_array_solvers_steps():
    # x^3 + x - c (increasing, one real root), Newton and bisection steps both in play
    for target in (-50.0, -1e-9, 0.0, 0.3, 2.0, 1e3):

        def f(x, c=target):
            return x**3 + x - c, 3 * x**2 + 1

        point = solve_point(f, -10.0, 10.0, 9.0)
        array = float(solve_increasing(f, np.array(-10.0), np.array(10.0), np.array(9.0)))
        assert point == array  # the same steps in floats and in arrays
        ref = brentq(lambda x, f=f: f(x)[0], -10.0, 10.0, **BRENT)
        assert abs(point - ref) <= 1e-13 + 1e-12 * abs(ref)  # [computed, scipy.optimize.brentq]


def test_point_and_array_forms_agree_on_a_drawn_lot_with_defects():
    lot = make_lot(seed=2611, count=60, spread=1.3, defect_rate=0.3)
    assert {d.kind for d in lot.devices} >= {"good", "open", "short", "leaky", "out-of-spec"}
    volts = np.array(REVERSE + FORWARD)
    for lot_device in lot.devices:
        device = lot_device.device
        arrays, slopes = device.current_slope(volts, TNOM_K)
        for v, array, slope in zip(volts.tolist(), arrays, slopes, strict=True):
            current, point_slope = device.point_current_slope(v, TNOM_K)
            assert close(current, float(array), atol=1e-24), (lot_device.kind, v)
            assert close(point_slope, float(slope), rtol=1e-9, atol=1e-24), (lot_device.kind, v)


def _smu(limit_a: float, fixed_range: float | None) -> Smu:
    smu = Smu(VirtualClock(), np.random.default_rng([7, 11]), 50.0)
    smu.limit_a, smu.nplc, smu.trigger_delay_s = limit_a, 0.1, 1e-3
    if fixed_range is not None:
        smu.set_fixed_range(fixed_range)
    smu.set_output(True)
    return smu


@pytest.mark.parametrize(("limit_a", "fixed_range"), [(5e-3, None), (1e-3, None), (5e-3, 1e-3)])
@pytest.mark.parametrize("count", [6, 81])  # solved level by level, and as one array
def test_a_list_measured_at_once_is_each_level_measured_in_turn(limit_a, fixed_range, count):
    # the SMU model's own definition (smu_model docstring): at each level of a list, in turn,
    # the level is applied and one acquisition made; doing the list at once must not change
    # one reading, the noise stream, the time spent, the range or the levels applied
    device = preset("FLC-1.8").device()
    levels = [round(40.0 * k / (count - 1), 6) for k in range(count)] + [25.0, 25.0, -0.4]
    at_once, in_turn = _smu(limit_a, fixed_range), _smu(limit_a, fixed_range)
    readings = at_once.measure_list(levels, at_once.true_list(device, levels, TNOM_K))
    expected = []
    for volts in levels:
        in_turn.set_level(volts)
        expected.append(in_turn.measure(device, TNOM_K))
    if count <= 32:
        assert readings == expected
    else:  # one array solve may move a noiseless value by an ulp; never a rounded reading
        for got, want in zip(readings, expected, strict=True):
            assert got.voltage_v == pytest.approx(want.voltage_v, rel=1e-12, abs=1e-12)
            assert got.current_a == pytest.approx(want.current_a, rel=1e-12, abs=1e-15)
            assert (got.limited, got.overflow, got.range_a) == (
                want.limited,
                want.overflow,
                want.range_a,
            )
    assert any(r.limited for r in readings) == (limit_a < 2e-3)
    assert any(r.overflow for r in readings) == (fixed_range is not None)
    assert at_once.clock.busy_s == in_turn.clock.busy_s
    assert (at_once.range_a, at_once.level_v) == (in_turn.range_a, in_turn.level_v)
    assert at_once.applied_levels == in_turn.applied_levels
    assert at_once.rng.normal() == in_turn.rng.normal()  # the streams stand at the same place


LIST_RUN = "ROUT:CLOS (@{ch});:CURR:LIM 3 MA;:OUTP ON;:VOLT:MODE LIST;:LIST:VOLT {levels};" \
    ":TRIG:COUN {count};:INIT"  # fmt: skip
AFTER = "FETC?;:STAT:QUES:COND?;:STAT:QUES?;:SIM:BUSY?;:SIM:LEV:COUN?;:SOUR:VOLT?;:SYST:ERR?"


@pytest.mark.parametrize("count", [7, 40, 81])
def test_a_list_reads_the_same_whether_it_runs_at_once_or_point_by_point(count):
    # a fault waiting for points makes the instrument run the list point by point (it could
    # fire at any point); one that never fires must change nothing the client can see
    levels = ",".join(f"{40.0 * k / (count - 1):.6E}" for k in range(count))
    replies = []
    for armed in (False, True):
        session = Session(build_instrument(SimOptions(clock="virtual", devices=4, seed=5)))
        # one message unit either way (50 us of instrument time each)
        session.handle('SIM:FAUL "device-open:on=point,after=100000"' if armed else "SIM:FAUL:CLE")
        for channel in (1, 2, 3, 4):
            message = LIST_RUN.format(ch=channel, levels=levels, count=count + 3)
            replies.append((armed, session.handle(f"{message};:{AFTER}")))
            session.handle("OUTP OFF")
    plain = [reply for armed, reply in replies if not armed]
    faulted = [reply for armed, reply in replies if armed]
    assert plain == faulted
    assert all(reply.endswith(';0,"No error"') for reply in plain)


def test_a_remembered_message_still_reports_its_errors_every_time(session):
    # IEEE 488.2 ch 7: a command error discards the rest of the message; an execution error
    # (-222, a level out of range) does not [from memory, SCPI.md 3.4]
    for _ in range(3):
        session.handle("SOUR:VOLT 1;BOGUS 2;SOUR:VOLT 3")
        session.handle("SOUR:VOLT 300;:SOUR:CURR:LIM 2 MA")
        session.handle("SOUR:VOLT 4")
        assert session.handle("SOUR:VOLT?;:SOUR:CURR:LIM?") == "+4.000000E+00;+2.000000E-03"
        codes = []
        while (entry := session.handle("SYST:ERR?")) and not entry.startswith("0,"):
            codes.append(int(entry.split(",")[0]))
        assert codes == [-113, -222]
