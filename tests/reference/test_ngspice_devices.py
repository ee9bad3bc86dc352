"""The simulator's device models against ngspice, point by point (REFERENCES.md s3).

Each case writes the netlist of a shipped preset (the JFET with its source resistor, with or
without the series blocking diode), runs `ngspice -b` at a temperature, and compares the
simulator's I(V) at every swept voltage with

    |I_sim - I_ngspice| <= RTOL |I_ngspice| + atol.

Why these tolerances: with the tightened options of REFERENCES.md s3 ngspice itself is good to
about 1e-6 relative. The constants differ a little: ngspice's k and q give kT/q 3.5e-7 away from
the exact SI 2019 values the simulator uses, and a junction carrying current at V/(n kT/q) of
about 30 turns that into about 1e-5 of its current. RTOL = 2e-5 covers that and nothing more
(measured worst: 1.1e-5 in reverse bias at -0.8 V). `atol` is 1 pA forward (a millionth of the
smallest SMU range). In blocked reverse bias the current is only IS (10 fA at 27 C, 18 pA at
85 C) and ngspice replaces the reverse junction law by a cubic below -3 kT/q (0.25 % off at
-0.25 V): there atol is 0.1 pA, ten times below the finest resolution the simulated SMU reports.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from simulator.presets import preset
from simulator.thermal import celsius_to_kelvin
from tests.reference.ngspice_run import regulator_netlist, run_dc

pytestmark = pytest.mark.reference

RTOL = 2e-5
FORWARD = (0.0, 40.0, 0.05)  # V: start, stop, step (801 points through knee and plateau)


def compare(name: str, temp_c: float, sweep: tuple[float, float, float], atol: float, tmp: Path):
    chosen = preset(name)
    netlist = regulator_netlist(chosen.params, chosen.diode, temp_c, sweep)
    volts, reference = run_dc(netlist, tmp)  # [computed, ngspice 39 -b]
    expected_points = round((sweep[1] - sweep[0]) / sweep[2]) + 1
    assert len(volts) == expected_points
    ours = chosen.device().current(volts, celsius_to_kelvin(temp_c))
    np.testing.assert_allclose(ours, reference, rtol=RTOL, atol=atol)
    return volts, reference


@pytest.mark.parametrize("temp_c", [-20.0, 27.0, 85.0])
@pytest.mark.parametrize("name", ["FLC-1.8", "FLC-1.8B"])
def test_forward_sweep_at_three_temperatures(name, temp_c, tmp_path):
    volts, current = compare(name, temp_c, FORWARD, 1e-12, tmp_path)
    assert current[volts == 25.0][0] > 1.5e-3  # the comparison covered the regulating plateau


@pytest.mark.parametrize("name", ["FLC-0.2", "FLC-4.7"])
def test_forward_sweep_of_the_smallest_and_largest_presets(name, tmp_path):
    compare(name, 27.0, FORWARD, 1e-12, tmp_path)


@pytest.mark.parametrize(("temp_c", "lowest_v"), [(27.0, -0.8), (85.0, -0.7)])
def test_reverse_bias_conducts_through_the_gate_junction(temp_c, lowest_v, tmp_path):
    _, current = compare("FLC-1.8", temp_c, (lowest_v, 0.0, 0.005), 1e-12, tmp_path)
    assert current[0] < -0.1  # REFERENCES.md s3: reverse bias explodes (-272 mA at -0.8 V)


@pytest.mark.parametrize("temp_c", [27.0, 85.0])
def test_reverse_bias_with_the_blocking_diode_leaves_only_its_saturation_current(temp_c, tmp_path):
    _, current = compare("FLC-1.8B", temp_c, (-40.0, 0.0, 0.25), 1e-13, tmp_path)
    diode = preset("FLC-1.8B").diode
    assert diode is not None
    # far in reverse only IS(T) flows [closed form, SPICE IS(T) law]
    saturation = diode.is_at(celsius_to_kelvin(temp_c))
    assert current[0] == pytest.approx(-saturation, rel=5e-3)
