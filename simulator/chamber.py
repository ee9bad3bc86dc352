"""A simulated temperature chamber: the air follows the set point, a device mount follows the air.

Two first-order lags in series, each solved exactly for a set point held between events:
    air:   dA/dt = (S - A) / tau_air
    mount: dM/dt = (A - M) / tau_mount
so with A0, M0 at the last event and t since then (tau_air != tau_mount)
    A(t) = S + (A0 - S) e^(-t/tau_air)
    M(t) = S + (M0 - S) e^(-t/tau_mount)
             + (A0 - S) tau_air / (tau_air - tau_mount) (e^(-t/tau_air) - e^(-t/tau_mount)).
Stopped, or with the door open, the target S is the room temperature. Faults, each switched on
by name: `sensor-open` (the air sensor reads SENSOR_OPEN_K, as an open thermocouple reads
full scale), `weak` (the chamber cannot get further than `reach_k` from the room, so a set point
beyond that is never reached), `door` (the door is open: the air relaxes to the room and the
status says so). Time comes from `now`, the instrument's own time line (virtual or real).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

from simulator.errors import OptionError

SENSOR_OPEN_K = 9.9e37  # an open sensor reads far off scale (value invented for the simulator)
FAULTS = frozenset({"sensor-open", "weak", "door"})


@dataclass
class Chamber:
    """Air and mount temperatures (kelvin) of one simulated chamber."""

    room_k: float = 296.15
    tau_air_s: float = 120.0
    tau_mount_s: float = 600.0
    reach_k: float = 20.0  # how far from the room a `weak` chamber gets
    now: Callable[[], float] = lambda: 0.0
    set_point_k: float = 296.15
    running: bool = False
    faults: set[str] = field(default_factory=set)

    def __post_init__(self) -> None:
        if self.tau_air_s <= 0 or self.tau_mount_s <= 0 or self.tau_air_s == self.tau_mount_s:
            raise OptionError("chamber", "needs two different positive time constants")
        self._air_k = self._mount_k = self.room_k
        self._time_s = self.now()

    def set_fault(self, name: str, on: bool = True) -> None:
        if name not in FAULTS:
            raise OptionError("chamber", f"unknown fault {name!r} (one of {sorted(FAULTS)})")
        self._advance()
        (self.faults.add if on else self.faults.discard)(name)

    def set_point(self, kelvin: float) -> None:
        self._advance()
        self.set_point_k = kelvin

    def start(self, on: bool = True) -> None:
        self._advance()
        self.running = on

    def air_reading_k(self) -> float:
        """What the air sensor reports (off scale when it is open)."""
        air = self._advance()[0]
        return SENSOR_OPEN_K if "sensor-open" in self.faults else air

    def snapshot(self) -> tuple[float, float, float]:
        """Time, air reading and mount temperature at one instant (for tests over the wire)."""
        air, mount = self._advance()
        reading = SENSOR_OPEN_K if "sensor-open" in self.faults else air
        return self._time_s, reading, mount

    def mount_k(self) -> float:
        return self._advance()[1]

    @property
    def door_open(self) -> bool:
        return "door" in self.faults

    def target_k(self) -> float:
        """Where the air is heading now."""
        if not self.running or self.door_open:
            return self.room_k
        if "weak" in self.faults:
            low, high = self.room_k - self.reach_k, self.room_k + self.reach_k
            return min(max(self.set_point_k, low), high)
        return self.set_point_k

    def _advance(self) -> tuple[float, float]:
        t_now = self.now()
        dt, target = t_now - self._time_s, self.target_k()
        if dt > 0:
            ea, em = math.exp(-dt / self.tau_air_s), math.exp(-dt / self.tau_mount_s)
            a0, m0 = self._air_k - target, self._mount_k - target
            ratio = self.tau_air_s / (self.tau_air_s - self.tau_mount_s)
            self._air_k = target + a0 * ea
            self._mount_k = target + m0 * em + a0 * ratio * (ea - em)
        self._time_s = t_now
        return self._air_k, self._mount_k
