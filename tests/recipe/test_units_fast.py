"""The common units are read from a table, not by pint (pint takes longer to load than the rest
of `ccbench check`): every entry must give pint's own SI value, bit for bit, and every other
unit must still reach pint. Source of the expected values: pint (its UnitRegistry)."""

from __future__ import annotations

import random

import pint
import pytest

from sequencer.recipe import units
from sequencer.recipe.units import COMMON_UNITS, KINDS, parse_quantity, parse_temperature_c

PINT = pint.UnitRegistry()


def _numbers() -> list[float]:
    rng = random.Random(17)
    plain = [0.0, 1.0, 1.8, 2.5, 25.0, 40.0, 0.001, 3.3, 123.456, 7e-3, 999.999, 1e-3, 0.1, 0.7]
    spread = [rng.uniform(-1000.0, 1000.0) for _ in range(200)]
    written = [float(f"{rng.uniform(0.0, 100.0):.3g}") for _ in range(200)]
    return plain + spread + written


@pytest.mark.parametrize(
    ("kind", "name"), [(kind, name) for kind, table in COMMON_UNITS.items() for name in table]
)
def test_every_common_unit_gives_pints_value_bit_for_bit(kind, name):
    si_unit = KINDS[kind][1]
    for x in _numbers():
        expected = float(PINT.Quantity(x, PINT.parse_units(name)).to(si_unit).magnitude)
        if expected and not units.SMALLEST_SI <= abs(expected) <= units.LARGEST_SI:
            continue  # refused either way (the range check is tested in test_units.py)
        assert parse_quantity(f"{x!r} {name}", kind) == expected, (x, name)


def test_the_table_holds_the_common_spellings_and_no_trap():
    assert COMMON_UNITS["current"]["mA"] == 1e-3
    assert COMMON_UNITS["resistance"]["kohm"] == 1e3
    assert "mohm" not in COMMON_UNITS["resistance"]
    assert not {"MV", "MA", "MW", "Ms"} & {n for table in COMMON_UNITS.values() for n in table}


def test_a_unit_outside_the_table_still_goes_to_pint():
    assert "kilovolt" not in COMMON_UNITS["voltage"]
    assert parse_quantity("1.5 kilovolt", "voltage") == pytest.approx(1500.0)  # pint's reading
    assert parse_quantity("2 milliohm", "resistance") == pytest.approx(2e-3)


def test_common_units_do_not_load_pint(monkeypatch):
    def refused():
        raise AssertionError("pint was asked for a common unit")

    monkeypatch.setattr(units, "registry", refused)
    assert parse_quantity("2 mA", "current") == 2e-3
    assert parse_quantity("100 kΩ", "resistance") == 1e5
    assert parse_temperature_c("253.15 K") == -20.0


@pytest.mark.parametrize("x", [-40.0, 0.0, 25.0, 85.0, 125.5, 150.0])
def test_temperatures_give_pints_value(x):
    as_c = round(float(PINT.Quantity(x, "degC").to("degC").magnitude), 9)
    from_k = round(float(PINT.Quantity(x + 273.15, "kelvin").to("degC").magnitude), 9)
    assert parse_temperature_c(f"{x!r} degC") == as_c
    assert parse_temperature_c(f"{x + 273.15!r} K") == from_k
