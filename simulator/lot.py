"""A seeded lot of devices: one preset, process spread per parameter, and defects.

Each device draws from its own child of `SeedSequence(seed)`, so device k is the same whatever the
lot size, and changing the defect rate never changes the process parameters of any device.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from simulator.devices import Device, JfetParams, open_circuit, regulator, short_circuit
from simulator.errors import OptionError
from simulator.presets import family, preset

DEFECT_BUILDERS = {"open": open_circuit, "short": short_circuit}  # kinds the data file may name


@dataclass(frozen=True)
class LotDevice:
    channel: int  # tray channel, 1-based
    kind: str  # "good" or a defect kind
    params: JfetParams  # the drawn process parameters (kept for defects too, for tracing)
    device: Device


@dataclass(frozen=True)
class Lot:
    seed: int
    preset: str
    spread: float
    defect_rate: float
    devices: tuple[LotDevice, ...]

    def __len__(self) -> int:
        return len(self.devices)

    def at(self, channel: int) -> LotDevice:
        return self.devices[channel - 1]


def make_lot(
    seed: int = 1,
    count: int = 20,
    preset_name: str = "FLC-1.8",
    spread: float = 1.0,
    defect_rate: float = 0.0,
) -> Lot:
    """Draw a lot; the same arguments always give the identical lot."""
    if count < 1 or spread < 0 or not 0 <= defect_rate <= 1:
        got = f"got {count}, {spread}, {defect_rate}"
        problem = f"needs count >= 1, spread >= 0, 0 <= defect rate <= 1 ({got})"
        raise OptionError("lot", problem)
    base = preset(preset_name).params
    children = np.random.SeedSequence(seed).spawn(count)
    devices = tuple(
        _draw(k + 1, np.random.default_rng(child), base, spread, defect_rate)
        for k, child in enumerate(children)
    )
    return Lot(seed, preset_name, spread, defect_rate, devices)


def _draw(
    channel: int, rng: np.random.Generator, base: JfetParams, spread: float, defect_rate: float
) -> LotDevice:
    sigmas = family().spread
    factors = np.exp(rng.normal(0.0, 1.0, len(sigmas)) * spread * np.array(list(sigmas.values())))
    drawn = {name: getattr(base, name) * float(f) for name, f in zip(sigmas, factors, strict=True)}
    params = replace(base, **drawn)
    defective = rng.random() < defect_rate
    kind = _defect_kind(rng) if defective else "good"
    device = DEFECT_BUILDERS[kind]() if defective else regulator(params)
    return LotDevice(channel, kind, params, device)


def _defect_kind(rng: np.random.Generator) -> str:
    weights = family().defects
    p = np.array(list(weights.values()))
    return str(rng.choice(list(weights), p=p / p.sum()))
