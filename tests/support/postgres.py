"""One throwaway PostgreSQL server for the test session (a fresh database per test), for the
shared results store's tests; `tests/conftest.py` makes the fixtures available everywhere."""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterator
from types import ModuleType

import pytest

from tests.support.pgserver import PgServer, find_bindir, remove_server, start_server

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
