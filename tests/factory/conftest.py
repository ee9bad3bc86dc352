"""Fixtures of the factory tests: one PostgreSQL server for the session (a fresh database per
test), and a small simulated station for part-by-part testing."""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType

import pytest

from tests.factory.pgserver import PgServer, find_bindir, remove_server, start_server

_names = itertools.count(1)


def _missing(why: str) -> None:
    """Skip with the reason; under CI (CI set) a missing piece fails instead."""
    if os.environ.get("CI"):
        pytest.fail(why + " (required under CI)")
    pytest.skip(why, allow_module_level=True)


def needs_psycopg() -> ModuleType:
    """The psycopg module, or the calling test module skipped (failed under CI)."""
    try:
        import psycopg
    except ImportError:
        _missing("psycopg is not installed; pip install '.[test]'")
    return psycopg


@pytest.fixture(scope="session")
def pg_server() -> Iterator[PgServer]:
    bindir = find_bindir()
    if bindir is None:
        _missing(
            "PostgreSQL server binaries (initdb, pg_ctl) not found; apt-get install postgresql"
        )
    needs_psycopg()
    server = start_server(bindir)
    try:
        yield server
    finally:
        remove_server(server)


@pytest.fixture
def pg_url(pg_server: PgServer) -> str:
    """A new, empty database on the session's server."""
    return pg_server.create_database(f"test_{os.getpid()}_{next(_names)}")


STATION = """\
station: {name}
instrument: {{resource: sim, timeout: 5 s}}
tray: {{channels: 1-{channels}}}
limits: {{max_voltage: 60 V, max_current: 20 mA, max_power: 250 mW}}
fixture: {{interlocked: true}}
simulator: {{seed: {seed}, preset: FLC-1.8, spread: 0.3, defect_rate: 0, clock: {clock}}}
{extra}"""

RECIPE = """\
product: FLC-1.8 current limiter, 1.8 mA nominal
lot: {lot}
station: {station}
nplc: 0.1
steps:
  - sweep: {{name: iv, start: 0 V, stop: 40 V, points: {points}, compliance: 5 mA}}
  - spot: {{name: at-test-voltage, voltage: 25 V, compliance: 5 mA, repeats: 3}}
judge:
  test_voltage: 25 V
  knee_voltage: 6 V
  slope_window: 4 V
  limits:
    regulated_current: {{min: 1.5 mA, max: 2.1 mA}}
  bins:
    - {{bin: 1, class: pass, name: good}}
    - {{bin: 3, class: fail, classification: [open, short]}}
    - {{bin: 9, class: fail, name: aborted, verdict: aborted}}
    - {{bin: 5, class: fail}}
{extra}"""


def write_station(
    folder: Path,
    *,
    name: str = "FLC-bench-P1",
    channels: int = 6,
    seed: int = 2611,
    clock: str = "virtual",
    extra: str = "",
) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.yaml"
    path.write_text(
        STATION.format(name=name, channels=channels, seed=seed, clock=clock, extra=extra)
    )
    return path


def write_recipe(
    folder: Path, station: Path, *, lot: str = "FK2611-07", points: int = 41, extra: str = ""
) -> Path:
    path = folder / "recipe.yaml"
    path.write_text(RECIPE.format(lot=lot, station=station.name, points=points, extra=extra))
    return path
