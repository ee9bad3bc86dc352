"""Open a chamber: a VISA resource, or "sim" for the simulated chamber as a child process."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

from instruments.chamber import TextChamber
from instruments.chamber_dialect import load_chamber_dialect
from instruments.embedded import EmbeddedSimulator
from instruments.errors import InstrumentError
from instruments.transport import open_visa

SIM_RESOURCE = "sim"


class ChamberConnection:
    """A driver on an open link; closing stops the simulated chamber if one was started.

    Closing leaves the chamber as it is: making it safe is the run's last act (see make_safe),
    because only the run knows the station's safe set point and that the SMU is off first."""

    def __init__(self, chamber: TextChamber, simulator: EmbeddedSimulator | None) -> None:
        self.chamber = chamber
        self._simulator = simulator

    def close(self) -> None:
        try:
            self.chamber.transport.close()
        finally:
            if self._simulator is not None:
                self._simulator.stop()

    def __enter__(self) -> ChamberConnection:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def connect_chamber(
    resource: str,
    *,
    dialect: str | Path = "chamber_text",
    timeout_s: float = 2.0,
    sim_options: Mapping[str, object] | None = None,
) -> ChamberConnection:
    """Open `resource` and identify the chamber; a bad dialect fails before anything starts."""
    chosen = load_chamber_dialect(dialect)
    if sim_options and resource != SIM_RESOURCE:
        detail = f"simulated chamber options were given for the resource {resource!r}"
        raise InstrumentError(resource, None, detail, hint=f"use them with {SIM_RESOURCE!r} only")
    simulator = EmbeddedSimulator(program="chamber") if resource == SIM_RESOURCE else None
    try:
        real = simulator.start(sim_options) if simulator is not None else resource
        chamber = TextChamber(open_visa(real, timeout_s=timeout_s), chosen)
        try:
            chamber.identify()
        except BaseException:
            chamber.transport.close()
            raise
    except BaseException:
        if simulator is not None:
            simulator.stop()
        raise
    return ChamberConnection(chamber, simulator)
