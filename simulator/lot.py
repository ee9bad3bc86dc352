"""A seeded lot of devices: one preset, process spread per parameter, and defects.

Each device draws from its own child of `SeedSequence(seed)` (the k-th child is
`SeedSequence(seed, spawn_key=(k,))`), so device k is the same whatever the lot size, and changing
the defect rate never changes the process parameters of any device. A device is drawn when it is
first asked for, so a lot of a million devices starts at once and holds only those in use.

Defect kinds (weights and ranges in data/presets.yaml): open and short replace the device;
leaky puts a resistance across it (a lower dynamic impedance, more current everywhere, also in
reverse); out-of-spec scales its RS so that the regulated current misses the family's +/-10 %.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import lru_cache

import numpy as np

from simulator.devices import Device, JfetParams, Parallel, Resistor, open_circuit, short_circuit
from simulator.errors import OptionError
from simulator.presets import Preset, family, preset

DEFECT_KINDS = ("open", "short", "leaky", "out-of-spec")  # the kinds the data file may name


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
    count: int
    held: tuple[LotDevice, ...] = ()  # devices given instead of drawn (with_devices)

    def __len__(self) -> int:
        return self.count

    def at(self, channel: int) -> LotDevice:
        """Device `channel` (1-based), drawn from its own seed on first use."""
        if not 1 <= channel <= self.count:
            raise IndexError(f"channel {channel} not in 1..{self.count}")
        if self.held:
            return self.held[channel - 1]
        return _device(self.seed, self.preset, self.spread, self.defect_rate, channel)

    @property
    def devices(self) -> tuple[LotDevice, ...]:
        """Every device, in channel order (for small lots: this draws them all)."""
        return self.held or tuple(self.at(channel) for channel in range(1, self.count + 1))

    def with_devices(self, devices: tuple[LotDevice, ...]) -> Lot:
        """The same lot holding these devices instead (a test puts a part in the tray)."""
        return replace(self, held=tuple(devices), count=len(devices))


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
    preset(preset_name)  # an unknown preset is refused now, not at the first device
    return Lot(seed, preset_name, spread, defect_rate, count)


@lru_cache(maxsize=4096)  # the devices in use (a tray's worth), not the whole lot
def _device(
    seed: int, preset_name: str, spread: float, defect_rate: float, channel: int
) -> LotDevice:
    child = np.random.SeedSequence(seed, spawn_key=(channel - 1,))  # = .spawn()'s child
    rng = np.random.default_rng(child)
    return _draw(channel, rng, preset(preset_name), spread, defect_rate)


def _draw(
    channel: int, rng: np.random.Generator, base: Preset, spread: float, defect_rate: float
) -> LotDevice:
    sigmas = family().spread
    factors = np.exp(rng.normal(0.0, 1.0, len(sigmas)) * spread * np.array(list(sigmas.values())))
    drawn = {
        name: getattr(base.params, name) * float(f) for name, f in zip(sigmas, factors, strict=True)
    }
    params = replace(base.params, **drawn)
    defective = rng.random() < defect_rate
    kind = _defect_kind(rng) if defective else "good"
    return LotDevice(channel, kind, params, _build(kind, base, params, rng))


def _build(kind: str, base: Preset, params: JfetParams, rng: np.random.Generator) -> Device:
    """The device of a drawn kind; defects draw their own values after everything else."""
    if kind == "open":
        return open_circuit()
    if kind == "short":
        return short_circuit()
    if kind == "leaky":
        return Parallel(base.device(params), Resistor(_log_uniform(rng, family().leaky_ohm)))
    if kind == "out-of-spec":
        factor = _log_uniform(rng, family().out_of_spec_rs_factor)
        factor = factor if rng.random() < 0.5 else 1.0 / factor
        return base.device(replace(params, rs_ohm=params.rs_ohm * factor))
    return base.device(params)


def _log_uniform(rng: np.random.Generator, bounds: tuple[float, float]) -> float:
    low, high = np.log(bounds)
    return float(np.exp(rng.uniform(low, high)))


def _defect_kind(rng: np.random.Generator) -> str:
    weights = family().defects
    unknown = set(weights) - set(DEFECT_KINDS)
    if unknown:
        raise OptionError("preset data", f"unknown defect kinds {sorted(unknown)}")
    p = np.array(list(weights.values()))
    return str(rng.choice(list(weights), p=p / p.sum()))
