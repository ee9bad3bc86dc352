"""ScpiSmu.list_sweep: the SCPI it sends, and what it reads back from the simulator over TCP."""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Iterator

import numpy as np
import pytest

from instruments.dialect import Dialect, load_dialect
from instruments.errors import DialectError, ReplyError, ScpiError
from instruments.loopback import CallableTransport
from instruments.scpi import make_block
from instruments.smu import ScpiSmu
from instruments.transport import open_visa
from simulator import ServerHandle, SimOptions, start_server
from tests.instruments.test_dialect_files import PACKAGED, _write_variant

LIST = "SOUR:VOLT:MODE LIST;:SOUR:LIST:VOLT 0.000000E+00,5.000000E+00,3.000000E+01;:TRIG:COUN 3"


def test_one_list_run_and_one_block_fetch(dialect: Dialect, make_instrument) -> None:
    readings = np.array([0, 1e-9, 5, 1.7e-3, 21.3, 2e-3], dtype="<f4")
    instrument = make_instrument({"FETC?": make_block(readings.tobytes()).decode("latin-1")})
    smu = ScpiSmu(CallableTransport(instrument), dialect)
    voltage, current, limited = smu.list_sweep([0, 5, 30], limit_a=2e-3, nplc=1, settle_s=1e-3)
    np.testing.assert_allclose(voltage, [0, 5, 21.3], rtol=1e-6)
    np.testing.assert_allclose(current, [1e-9, 1.7e-3, 2e-3], rtol=1e-6)
    assert list(limited) == [False, False, True]  # at the limit: the clamp-fraction rule
    after_configure = instrument.sent[instrument.sent.index("SYST:ERR?") + 1 :]
    assert after_configure == [
        "STAT:QUES:EVEN?",  # cleared before the list: what is latched after it is the list's
        LIST,
        "FORM REAL,32;:FORM:BORD SWAP",
        "INIT",
        "SYST:ERR?",  # answered when the run is over: a refused list stops here
        "FETC?",
        "FORM ASC",
        "SOUR:VOLT:MODE FIX;:TRIG:COUN 1",
        "STAT:QUES:EVEN?",  # nothing latched: no clamp was missed
    ]


def test_a_short_fetch_is_refused_and_fixed_mode_restored(dialect, make_instrument) -> None:
    short = make_block(np.zeros(4, "<f4").tobytes()).decode("latin-1")
    instrument = make_instrument({"FETC?": short})
    smu = ScpiSmu(CallableTransport(instrument), dialect)
    with pytest.raises(ReplyError, match="4 values for 3 points"):
        smu.list_sweep([0, 5, 30], limit_a=2e-3, nplc=1, settle_s=0)
    assert instrument.sent[-1] == "SOUR:VOLT:MODE FIX;:TRIG:COUN 1"


@pytest.mark.parametrize("levels", [[], [[1.0]], [1.0, float("nan")]])
def test_impossible_levels_are_refused_before_sending(smu: ScpiSmu, instrument, levels) -> None:
    with pytest.raises(ValueError):
        smu.list_sweep(levels, limit_a=1e-3, nplc=1, settle_s=0)
    assert instrument.sent == []


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        ('initiate: "INIT"', "initiate: null", "needs initiate too"),
        ("binary_big_endian: false", "binary_big_endian: null", "byte order"),
        ("binary_big_endian: false", "binary_big_endian: 0", "true or false"),
        ("fetch_fields: [voltage, current]", "fetch_fields: [voltage]", "'current' exactly once"),
        ("list_max_points: 2500", "list_max_points: 0", "whole number >= 1"),
        ('"INIT"', '"INIT {count}"', "no placeholder"),
    ],
)
def test_list_keys_are_checked(tmp_path, old, new, match) -> None:
    with pytest.raises(DialectError, match=match):
        load_dialect(_write_variant(tmp_path, old, new))


def test_a_dialect_file_from_before_the_list_keys_still_loads(tmp_path) -> None:
    old_file = tmp_path / "old.yaml"
    old_file.write_text(PACKAGED.read_text().split("# Source lists and the reading buffer")[0])
    old = load_dialect(old_file)
    assert old.list_voltage is None and not old.has_lists


# --- against the simulator over TCP --------------------------------------------------------


@pytest.fixture
def served() -> Iterator[ServerHandle]:
    handle = start_server(SimOptions(clock="virtual", devices=2, spread=0.0))
    yield handle
    handle.stop()


@pytest.fixture
def sim_smu(served: ServerHandle, dialect: Dialect) -> Iterator[ScpiSmu]:
    smu = ScpiSmu(open_visa(served.resource, timeout_s=0.5), dialect)
    smu.select_channel(1)
    smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
    smu.set_voltage(0.0)
    smu.output(True)
    yield smu
    smu.safe_state()
    smu.close()


LEVELS = np.linspace(0.0, 40.0, 81)


def reference(smu: ScpiSmu, limit_a: float) -> tuple[np.ndarray, ...]:
    plain = dataclasses.replace(smu.dialect, list_voltage=None)
    return ScpiSmu(smu.transport, plain).list_sweep(LEVELS, limit_a=limit_a, nplc=1, settle_s=0)


VARIANTS = ["little-endian block", "big-endian block", "ascii", "chunks of 7"]


def with_list_status(dialect: Dialect) -> Dialect:
    """The default dialect with the simulator's own status element per buffered reading
    (FORM:FIEL, not SCPI-1999), so that a clamp is told by its bit, as point by point: the
    clamp-fraction rule would also flag the free readings within 2 % of this tight limit."""
    return dataclasses.replace(
        dialect,
        list_voltage=dialect.list_voltage + ";:FORM:FIEL VOLT,CURR,STAT",
        fetch_fields=("voltage", "current", "status"),
        list_compliance_bit=1,
        ascii_format="FORM ASC;:FORM:FIEL VOLT,CURR",
    )


def variants(dialect: Dialect) -> dict[str, Dialect]:
    dialect = with_list_status(dialect)
    return {
        "little-endian block": dialect,
        "big-endian block": dataclasses.replace(
            dialect, binary_format="FORM REAL,32;:FORM:BORD NORM", binary_big_endian=True
        ),
        "ascii": dataclasses.replace(dialect, binary_format=None, binary_big_endian=None),
        "chunks of 7": dataclasses.replace(dialect, list_max_points=7),
    }


@pytest.mark.sim
@pytest.mark.parametrize(
    "variant", ["little-endian block", "big-endian block", "ascii", "chunks of 7"]
)
def test_list_sweep_reads_what_point_by_point_reads(sim_smu: ScpiSmu, variant: str) -> None:
    expected_v, expected_i, expected_limited = reference(sim_smu, 1.8e-3)
    smu = ScpiSmu(sim_smu.transport, variants(sim_smu.dialect)[variant])
    voltage, current, limited = smu.list_sweep(LEVELS, limit_a=1.8e-3, nplc=1, settle_s=0)
    assert list(limited) == list(expected_limited) and limited.any() and not limited.all()
    free = ~limited
    np.testing.assert_allclose(voltage[free], LEVELS[free], atol=5 * 50e-6)  # 5 sigma noise
    # the same device, the same levels: both within 5 sigma of the 5 ppm-of-range noise (float32
    # keeps 7 digits, well below that)
    np.testing.assert_allclose(current, expected_i, atol=2 * 5 * 5e-6 * 1e-2)
    np.testing.assert_allclose(voltage[limited], expected_v[limited], atol=1e-3)
    assert sim_smu.transport.query("SOUR:VOLT?;:VOLT:MODE?;:FORM?") == "+4.000000E+01;FIX;ASC"


@pytest.mark.sim
def test_a_hazardous_list_behind_an_open_lid_is_refused_at_once(sim_smu: ScpiSmu) -> None:
    sim_smu.transport.write("SIM:LID OPEN")
    start = time.monotonic()
    with pytest.raises(ScpiError, match="interlock open"):
        sim_smu.list_sweep([10.0, 45.0], limit_a=1e-3, nplc=1, settle_s=0)
    assert time.monotonic() - start < 0.4  # no waiting for a fetch that cannot come


@pytest.mark.sim
def test_a_list_longer_than_the_timeout_waits_for_its_run() -> None:
    with start_server(SimOptions(clock="real", devices=1)) as handle:
        smu = ScpiSmu(open_visa(handle.resource, timeout_s=0.3), load_dialect("scpi1999"))
        smu.select_channel(1)
        smu.output(True)
        start = time.monotonic()
        voltage, _, _ = smu.list_sweep(np.linspace(0, 10, 30), limit_a=5e-3, nplc=1, settle_s=0)
        took = time.monotonic() - start
        smu.safe_state()
        smu.close()
    assert len(voltage) == 30
    assert took > 30 * 0.02  # the instrument's own time: 30 apertures of 20 ms, beyond 0.3 s
