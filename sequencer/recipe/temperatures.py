"""The recipe's `temperatures:`: set points the lot's steps run at, each once its soak rule holds.

    temperatures:
      - 25 degC                                   # the default soak rule
      - {set: 85 degC, band: 1 K, for: 10 min, timeout: 45 min}
      - {set: -20 degC}

A set point is stable once the chamber's reading has stayed within `band` of it for `for` (the
mount lags the air, so the time at temperature is what lets the devices follow). The default soak
rule, 0.5 K for 5 min with a 60 min timeout, is common practice, no source. A soak that has not
settled by `timeout` ends the run (sequencer.run.soak).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sequencer.recipe.fields import Fields
from sequencer.recipe.units import (
    UnitProblem,
    parse_quantity,
    parse_temperature_c,
    parse_temperature_step_k,
)
from sequencer.recipe.yamlsource import Source

DEFAULT_BAND_K = 0.5  # common practice, no source
DEFAULT_SOAK_S = 300.0  # common practice, no source
DEFAULT_TIMEOUT_S = 3600.0  # common practice, no source
MAX_POINTS = 100


@dataclass(frozen=True, kw_only=True)
class SetPoint:
    celsius: float
    band_k: float = DEFAULT_BAND_K
    soak_s: float = DEFAULT_SOAK_S
    timeout_s: float = DEFAULT_TIMEOUT_S

    def describe(self) -> str:
        return f"{self.celsius:g} degC (within {self.band_k:g} K for {self.soak_s:g} s)"


def parse_temperatures(source: Source, value: Any) -> tuple[SetPoint, ...]:
    """The recipe's set points, in order (empty when the recipe has none: no chamber used)."""
    if value is None:
        return ()
    if not isinstance(value, list) or not 1 <= len(value) <= MAX_POINTS:
        problem = f"must be a list of 1 to {MAX_POINTS} set points, e.g. [25 degC, 85 degC]"
        raise source.error("temperatures", problem)
    return tuple(_point(source, f"temperatures[{i}]", item) for i, item in enumerate(value))


def _point(source: Source, where: str, item: Any) -> SetPoint:
    if not isinstance(item, dict):  # a bare set point, with the default soak rule
        return SetPoint(celsius=_absolute(source, where, item))
    f = Fields.at(source, where, item)
    celsius = _absolute(source, f.where("set"), f.raw("set"))
    band = _band(f)
    soak = _time(f, "for", DEFAULT_SOAK_S)
    timeout = _time(f, "timeout", DEFAULT_TIMEOUT_S)
    f.check(timeout > soak, "timeout", f"must be longer than the soak ('for': {soak:g} s)")
    f.finish()
    return SetPoint(celsius=celsius, band_k=band, soak_s=soak, timeout_s=timeout)


def _absolute(source: Source, where: str, value: Any) -> float:
    try:
        return parse_temperature_c(value)
    except UnitProblem as exc:
        raise source.error(where, str(exc)) from None


def _band(f: Fields) -> float:
    if "band" not in f.data:
        f.used.add("band")
        return DEFAULT_BAND_K
    try:
        band = parse_temperature_step_k(f.raw("band"))
    except UnitProblem as exc:
        raise f.source.error(f.where("band"), str(exc)) from None
    f.check(band > 0, "band", "must be positive, e.g. '0.5 K'")
    return band


def _time(f: Fields, key: str, default: float) -> float:
    if key not in f.data:
        f.used.add(key)
        return default
    try:
        seconds = parse_quantity(f.raw(key), "time")
    except UnitProblem as exc:
        raise f.source.error(f.where(key), str(exc)) from None
    f.check(seconds > 0, key, "must be positive")
    return seconds
