"""Temperature coefficient of the regulated current against ngspice and the closed form.

Truth: ngspice (Debian) runs the same level-1 JFET + source-resistor netlist at several `.temp`
values; the regulated current is read on the plateau. ngspice's level-1 JFET temperature law
[src: ngspice manual, JFET model parameters TCV and BEX]:
    VTO(T)  = VTO - TCV (T - TNOM)
    BETA(T) = BETA (T / TNOM)^BEX
(the gate junction's IS(T) follows the diode law, which does not move the channel current on the
plateau). The closed form checks the same numbers a second way: the lambda = 0 self-bias solution
ID = 2 IDSS / ((2k+1) + sqrt(4k+1)), k = IDSS RS / |VP| [REFERENCES.md s2], with IDSS and VP
taken at each temperature by the law above (written here, apart from simulator/).
Tolerance: RTOL 2e-5 of the current, the one tests/reference/test_ngspice_devices.py uses.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from sequencer.judge.tempco import fit_tempco, zero_tc_value
from simulator.devices import JfetParams, regulator
from tests.reference.ngspice_run import regulator_netlist, run_dc
from tests.support.textbook import closed_form_current

pytestmark = pytest.mark.reference

RTOL = 2e-5  # as tests/reference/test_ngspice_devices.py
TEMPS_C = (-20.0, 0.0, 25.0, 50.0, 85.0)
KELVIN = 273.15
TNOM_K = 300.15  # SPICE's default TNOM, 27 degC [src: ngspice manual, .options TNOM]
PLATEAU_V = 20.0


def params(rs_ohm: float, lam: float = 0.0) -> JfetParams:
    # Invented part of the demo family's order (simulator/data/presets.yaml common terms).
    return JfetParams(idss_a=10e-3, vto_v=-3.0, lambda_per_v=lam, rs_ohm=rs_ohm,
                      tcv_v_per_k=2.2e-3, bex=-1.5)  # fmt: skip


def ngspice_current(p: JfetParams, temp_c: float, tmp_path) -> float:
    folder = tmp_path / f"t{temp_c:g}-{p.rs_ohm:g}"
    folder.mkdir()
    volts, amps = run_dc(regulator_netlist(p, None, temp_c, (PLATEAU_V, PLATEAU_V, 1.0)), folder)
    assert volts[0] == pytest.approx(PLATEAU_V)
    return float(amps[0])


def textbook_current(p: JfetParams, temp_k: float) -> float:
    vto = p.vto_v - p.tcv_v_per_k * (temp_k - TNOM_K)  # ngspice manual, TCV
    beta = p.idss_a / p.vto_v**2 * (temp_k / TNOM_K) ** p.bex  # ngspice manual, BEX
    return float(closed_form_current(beta * vto**2, vto, p.rs_ohm))


def test_simulator_and_closed_form_follow_ngspice_over_temperature(tmp_path):
    p = params(1000.0)
    device = regulator(p, None)
    for temp_c in TEMPS_C:
        truth = ngspice_current(p, temp_c, tmp_path)
        ours = float(device.current(np.array([PLATEAU_V]), temp_c + KELVIN)[0])
        assert ours == pytest.approx(truth, rel=RTOL)  # simulator vs ngspice
        # lambda = 0: the plateau is flat, so the closed form holds on it (gate leakage aside).
        assert textbook_current(p, temp_c + KELVIN) == pytest.approx(truth, rel=RTOL)


def test_fitted_coefficient_covers_the_ngspice_slope(tmp_path):
    p = params(1000.0, lam=0.01)
    temps_k = [t + KELVIN for t in TEMPS_C]
    truth = [ngspice_current(p, t, tmp_path) for t in TEMPS_C]
    device = regulator(p, None)
    ours = [float(device.current(np.array([PLATEAU_V]), t)[0]) for t in temps_k]
    fitted = fit_tempco(temps_k, ours)
    reference = np.polyfit(temps_k, truth, 1)[0]  # numpy: the same line through ngspice's points
    assert abs(fitted.a_per_k - reference) <= 2 * fitted.u_a_per_k + 1e-9 * abs(reference)
    # The local slope at 25 degC by central difference of ngspice runs: the line's slope is an
    # average over -20..85 degC, so it agrees within the curvature the fit leaves as scatter.
    hi, lo = (ngspice_current(p, 25.0 + d, tmp_path) for d in (1.0, -1.0))
    assert abs(fitted.a_per_k - (hi - lo) / 2.0) <= 3 * fitted.u_a_per_k
    assert fitted.u_a_per_k < 0.05 * abs(fitted.a_per_k)  # the check is not vacuous


def test_zero_coefficient_current_matches_the_closed_form(tmp_path):
    # Small RS: the falling mobility (BEX) wins and the current falls with temperature; large RS:
    # the growing |VTO| (TCV) wins and it rises. In between sits a zero-coefficient current.
    resistors = (300.0, 1000.0, 1800.0, 2400.0, 3300.0, 6800.0)
    temps_k = [t + KELVIN for t in (0.0, 25.0, 50.0)]
    levels, slopes = [], []
    for rs in resistors:
        p = params(rs)
        fitted = fit_tempco(temps_k, [ngspice_current(p, t - KELVIN, tmp_path) for t in temps_k])
        levels.append(fitted.value_at_ref)
        slopes.append(fitted.a_per_k)
    assert min(slopes) < 0 < max(slopes)  # bracketed
    found = zero_tc_value(levels, slopes)

    def slope_at(rs: float) -> float:  # closed-form dI/dT at 25 degC by central difference
        p = params(rs)
        return textbook_current(p, 299.15) - textbook_current(p, 297.15)

    rs_zero = brentq(slope_at, resistors[0], resistors[-1])
    exact = textbook_current(params(rs_zero), 298.15)
    # Linear interpolation between neighbouring RS values: good to a few % of the current.
    assert found == pytest.approx(exact, rel=0.05)
