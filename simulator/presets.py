"""The invented FLC family of regulators, read from data/presets.yaml."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any

import yaml

from simulator.devices import JfetParams
from simulator.errors import OptionError


@dataclass(frozen=True)
class Preset:
    name: str
    nominal_a: float  # regulated current at 25 V the family name promises
    params: JfetParams


@dataclass(frozen=True)
class Family:
    default: str
    presets: dict[str, Preset]
    spread: dict[str, float]  # relative sigma per JfetParams field at spread 1
    defects: dict[str, float]  # defect kind -> relative weight


@cache
def family() -> Family:
    """The preset family, parsed once from the package data."""
    text = resources.files(__package__).joinpath("data/presets.yaml").read_text("utf-8")
    return _parse(yaml.safe_load(text))


def _parse(raw: dict[str, Any]) -> Family:
    presets = {}
    for name, fields in raw["presets"].items():
        values = {key: float(value) for key, value in fields.items()}
        nominal = values.pop("nominal_a")
        presets[name] = Preset(name, nominal, JfetParams(**values))
    spread = {key: float(value) for key, value in raw["spread"].items()}
    defects = {key: float(value) for key, value in raw["defects"].items()}
    return Family(str(raw["default"]), presets, spread, defects)


def preset(name: str) -> Preset:
    """The preset of that name; OptionError lists the known names otherwise."""
    presets = family().presets
    if name not in presets:
        raise OptionError("preset", f"unknown {name!r} (known: {', '.join(presets)})")
    return presets[name]
