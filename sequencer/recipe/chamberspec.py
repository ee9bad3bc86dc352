"""The station's temperature source: a chamber (or hot plate, or air stream) as its own instrument.

    chamber:
      resource: sim                 # a VISA resource, or sim for the simulated chamber
      dialect: chamber_text         # its command text (instruments/dialects/chamber_text.yaml)
      timeout: 2 s
      lowest: -40 degC              # no set point below this ...
      highest: 125 degC             # ... or above this (the fixture's and the cables' range)
      rate: 5 K/min                 # the fastest the set point may move (thermal shock)
      safe: 25 degC                 # where every ending leaves it (or 'off': stopped)
      simulator: {speed: 600}       # options of the simulated chamber (resource: sim only)

`safe` must lie within lowest..highest: the last act of a run must never break the station's own
limits.
"""

from __future__ import annotations

from dataclasses import dataclass

SIM_RESOURCE = "sim"
DEFAULT_DIALECT = "chamber_text"


@dataclass(frozen=True, kw_only=True)
class ChamberSpec:
    resource: str
    dialect: str
    timeout_s: float
    lowest_c: float
    highest_c: float
    rate_k_per_s: float
    safe_c: float | None  # None: stop the chamber at the end
    simulator: tuple[tuple[str, object], ...] = ()

    @property
    def simulator_options(self) -> dict[str, object]:
        return dict(self.simulator)
