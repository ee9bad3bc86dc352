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
from typing import Any

from sequencer.recipe.fields import Fields, positive
from sequencer.recipe.units import (
    UnitProblem,
    parse_rate_k_per_s,
    parse_temperature_c,
)
from sequencer.recipe.yamlsource import Source

SIM_RESOURCE = "sim"
DEFAULT_DIALECT = "chamber_text"
SIM_KEYS = ("room", "tau_air", "tau_mount", "reach", "speed", "lowest", "highest", "faults")


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


def parse_chamber(source: Source, value: Any) -> ChamberSpec | None:
    """The station's `chamber:` mapping (None when the station has no temperature source)."""
    if value is None:
        return None
    f = Fields.at(source, "chamber", value)
    resource = f.text("resource")
    dialect = f.text("dialect", DEFAULT_DIALECT)
    timeout_s = positive(f, "timeout", "time", "2 s")
    lowest, highest = _temperature(f, "lowest"), _temperature(f, "highest")
    f.check(lowest < highest, "highest", f"must be above lowest ({lowest:g} degC)")
    rate = _rate(f)
    safe = _safe(f, lowest, highest)
    sim = _simulator(source, f, resource)
    f.finish()
    return ChamberSpec(
        resource=resource,
        dialect=dialect,
        timeout_s=timeout_s,
        lowest_c=lowest,
        highest_c=highest,
        rate_k_per_s=rate,
        safe_c=safe,
        simulator=sim,
    )


def _temperature(f: Fields, key: str) -> float:
    try:
        return parse_temperature_c(f.raw(key))
    except UnitProblem as exc:
        raise f.source.error(f.where(key), str(exc)) from None


def _rate(f: Fields) -> float:
    try:
        rate = parse_rate_k_per_s(f.raw("rate"))
    except UnitProblem as exc:
        raise f.source.error(f.where("rate"), str(exc)) from None
    f.check(rate > 0, "rate", "must be positive, e.g. '5 K/min'")
    return rate


def _safe(f: Fields, lowest: float, highest: float) -> float | None:
    if f.raw("safe") == "off":  # written "off" (quoted: a bare off is a YAML boolean)
        return None
    safe = _temperature(f, "safe")
    within = f"must lie within lowest..highest ({lowest:g}..{highest:g} degC), or be 'off'"
    f.check(lowest <= safe <= highest, "safe", within)
    return safe


def _simulator(source: Source, f: Fields, resource: str) -> tuple[tuple[str, object], ...]:
    value = f.raw("simulator", None)
    if value is None:
        return ()
    f.check(resource == SIM_RESOURCE, "simulator", "goes with 'resource: sim' only")
    sim = Fields.at(source, f.where("simulator"), value)
    out = []
    for key in SIM_KEYS:
        if key in sim.data:
            item = sim.raw(key)
            if key == "faults":
                ok = isinstance(item, list) and all(isinstance(x, str) for x in item)
                sim.check(ok, key, "must be a list of fault names")
                item = tuple(item)
            else:
                sim.number(key)
            out.append((key, item))
    sim.finish()
    return tuple(out)
