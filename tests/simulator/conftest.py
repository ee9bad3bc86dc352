"""Shared fixtures: a fresh simulated instrument on the virtual clock, and a session on it."""

from __future__ import annotations

import pytest

from simulator import Session, SimOptions, build_instrument
from simulator.instrument import Instrument


@pytest.fixture
def inst() -> Instrument:
    return build_instrument(SimOptions(clock="virtual", devices=5))


@pytest.fixture
def session(inst: Instrument) -> Session:
    return Session(inst)


def errors(session: Session) -> list[int]:
    """Drain the error queue through SCPI and return the codes, oldest first."""
    codes = []
    while (entry := session.handle("SYST:ERR?")) and not entry.startswith("0,"):
        codes.append(int(entry.split(",")[0]))
    return codes
