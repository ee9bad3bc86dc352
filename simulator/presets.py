"""The invented FLC family of regulators, read from data/presets.yaml."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any

import yaml

from simulator.devices import Device, Diode, JfetParams, regulator
from simulator.errors import OptionError

BLOCKED_SUFFIX = "B"  # FLC-1.8B: the FLC-1.8 behind a series blocking diode


@dataclass(frozen=True)
class Preset:
    name: str
    nominal_a: float  # regulated current at 25 V the family name promises
    params: JfetParams
    diode: Diode | None = None  # series blocking diode at the anode, if any

    def device(self, params: JfetParams | None = None) -> Device:
        """The preset's device, or the same construction with drawn parameters."""
        return regulator(params or self.params, self.diode)


@dataclass(frozen=True)
class Family:
    default: str
    presets: dict[str, Preset]
    spread: dict[str, float]  # relative sigma per JfetParams field at spread 1
    defects: dict[str, float]  # defect kind -> relative weight
    leaky_ohm: tuple[float, float]  # range of a leaky device's parallel resistance
    out_of_spec_rs_factor: tuple[float, float]  # range of an out-of-spec device's RS factor


@cache
def family() -> Family:
    """The preset family, parsed once from the package data."""
    text = resources.files(__package__).joinpath("data/presets.yaml").read_text("utf-8")
    return _parse(yaml.safe_load(text))


def _parse(raw: dict[str, Any]) -> Family:
    common = {key: float(value) for key, value in raw.get("common", {}).items()}
    diode = Diode(**{key: float(value) for key, value in raw["blocking_diode"].items()})
    presets = {}
    for name, fields in raw["presets"].items():
        values = common | {key: float(value) for key, value in fields.items()}
        nominal = values.pop("nominal_a")
        params = JfetParams(**values)
        presets[name] = Preset(name, nominal, params)
        presets[name + BLOCKED_SUFFIX] = Preset(name + BLOCKED_SUFFIX, nominal, params, diode)
    spread = {key: float(value) for key, value in raw["spread"].items()}
    defects = {key: float(value) for key, value in raw["defects"].items()}
    leaky, factor = (_range(raw[key]) for key in ("leaky_ohm", "out_of_spec_rs_factor"))
    return Family(str(raw["default"]), presets, spread, defects, leaky, factor)


def _range(values: list[Any]) -> tuple[float, float]:
    low, high = (float(value) for value in values)
    return low, high


def preset(name: str) -> Preset:
    """The preset of that name; OptionError lists the known names otherwise."""
    presets = family().presets
    if name not in presets:
        raise OptionError("preset", f"unknown {name!r} (known: {', '.join(presets)})")
    return presets[name]
