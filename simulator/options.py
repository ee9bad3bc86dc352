"""Simulator options (the `serve` command line as a frozen dataclass) and building from them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from simulator.clock import make_clock
from simulator.errors import OptionError
from simulator.faults import FaultSchedule, FaultSpec
from simulator.instrument import HOT_SWITCH_V, TOUCH_SAFE_V, Instrument
from simulator.lot import make_lot
from simulator.presets import preset
from simulator.session import command_tree
from simulator.smu_model import Smu
from simulator.thermal import Thermal, celsius_to_kelvin
from simulator.version import __version__

# Devices are drawn as they are reached (simulator/lot.py): any lot size costs nothing at start;
# the bound only catches a slip of the keyboard.
MAX_DEVICES = 100_000_000
NOISE_STREAM = 0x5EED  # keeps the noise stream apart from the lot's streams of the same seed


@dataclass(frozen=True)
class SimOptions:
    """Everything `python -m simulator serve` accepts; validated on construction."""

    host: str = "127.0.0.1"
    port: int = 0  # 0: the OS picks a free port
    seed: int = 1
    devices: int = 20
    preset: str = "FLC-1.8"
    spread: float = 1.0  # scales the process spread; 1 gives about 5 % sigma of IP
    defect_rate: float = 0.0
    clock: str = "real"
    line_frequency: float = 50.0
    touch_safe_v: float = TOUCH_SAFE_V
    hot_switch_v: float = HOT_SWITCH_V
    faults: tuple[FaultSpec, ...] = ()  # armed at start (simulator/faults.py)
    temperature: float = 27.0  # ambient, Celsius (27 C is the SPICE nominal: no shift)
    thermal_resistance: float = 0.0  # junction to ambient, K/W; 0 turns self-heating off
    thermal_time: float = 1.0  # thermal time constant, s
    # How this station's readings differ from the truth, for qualification studies whose answer
    # must be checked against what was set: a gain and an offset (a fraction of the current
    # range, as instrument offsets are specified) on every current reading (a
    # station-to-station difference) and a spread drawn anew each time a part is contacted (the
    # station's repeatability). noise_seed 0 keeps the noise streams of `seed` alone; another
    # value gives each run its own noise on the same lot (a repeat of the measurement).
    reading_gain: float = 0.0  # relative, e.g. 0.001 reads 0.1 % high
    range_offset: float = 0.0  # of the current range, e.g. 0.0004 reads 4 uA high on 10 mA
    contact_spread: float = 0.0  # relative standard deviation per contact
    noise_seed: int = 0

    def __post_init__(self) -> None:
        checks = {
            "host": (self.host == "127.0.0.1", "only 127.0.0.1 is served"),
            "port": (0 <= self.port <= 65535, "must be 0..65535"),
            "seed": (0 <= self.seed <= 999_999, "must be 0..999999 (it is the 6-digit serial)"),
            "devices": (1 <= self.devices <= MAX_DEVICES, f"must be 1..{MAX_DEVICES}"),
            "spread": (0 <= self.spread <= 10, "must be 0..10"),
            "defect_rate": (0 <= self.defect_rate <= 1, "must be 0..1"),
            "clock": (self.clock in ("real", "virtual"), "must be real or virtual"),
            "line_frequency": (self.line_frequency in (50, 60), "must be 50 or 60"),
            "temperature": (-55 <= self.temperature <= 150, "must be -55..150 C"),
            "thermal_resistance": (0 <= self.thermal_resistance <= 1e4, "must be 0..10000 K/W"),
            "thermal_time": (1e-3 <= self.thermal_time <= 1e4, "must be 0.001..10000 s"),
            "reading_gain": (-0.1 <= self.reading_gain <= 0.1, "must be -0.1..0.1"),
            "range_offset": (abs(self.range_offset) <= 0.01, "must be -0.01..0.01"),
            "contact_spread": (0 <= self.contact_spread <= 0.1, "must be 0..0.1"),
            "noise_seed": (0 <= self.noise_seed <= 999_999, "must be 0..999999"),
        }
        for name, (ok, problem) in checks.items():
            if not ok:
                raise OptionError(name, f"{problem} (got {getattr(self, name)!r})")
        preset(self.preset)  # raises OptionError naming the known presets
        if not all(isinstance(spec, FaultSpec) for spec in self.faults):
            raise OptionError("faults", "must be FaultSpec values (parse them with faults.py)")


def build_instrument(options: SimOptions | None = None) -> Instrument:
    """A fresh instrument with its seeded lot, noise stream and clock."""
    o = options or SimOptions()
    lot = make_lot(o.seed, o.devices, o.preset, o.spread, o.defect_rate)
    rng = np.random.default_rng([NOISE_STREAM, o.seed])
    smu = Smu(make_clock(o.clock), rng, float(o.line_frequency))
    smu.station_error(o.reading_gain, o.range_offset, o.contact_spread, o.noise_seed)
    thermal = Thermal(
        celsius_to_kelvin(o.temperature),
        o.thermal_resistance,
        o.thermal_time,
        now=lambda: smu.clock.now_s,
    )
    return Instrument(
        lot,
        smu,
        version=__version__,
        touch_safe_v=o.touch_safe_v,
        hot_switch_v=o.hot_switch_v,
        faults=FaultSchedule.of(o.faults, o.seed, command_tree()),
        thermal=thermal,
    )
