"""Junction temperature of each tray device: the ambient, plus optional self-heating.

Self-heating is one thermal pole per device: the junction moves towards T_amb + P Rth with
time constant tau, driven by the power P = V x I the device dissipates, on the instrument's own
time line (for the virtual clock that is its busy time, so a virtual run heats like a real one).
The power is held between events, so each step uses the exact solution of the first-order law
    T(t + dt) = T_inf + (T(t) - T_inf) exp(-dt / tau),   T_inf = T_amb + P Rth.
With Rth = 0 (the default) every junction is at the ambient and nothing is computed.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from simulator.errors import OptionError

KELVIN_AT_0C = 273.15


@dataclass
class _Junction:
    temp_k: float
    power_w: float
    time_s: float


class Thermal:
    """Temperatures of the devices on the tray, by channel."""

    def __init__(
        self,
        ambient_k: float,
        rth_k_per_w: float = 0.0,
        tau_s: float = 1.0,
        now: Callable[[], float] = lambda: 0.0,
    ) -> None:
        if rth_k_per_w < 0 or tau_s <= 0 or ambient_k <= 0:
            raise OptionError("thermal", "needs Rth >= 0, tau > 0 and a positive temperature")
        self.ambient_k = ambient_k
        self.rth_k_per_w = rth_k_per_w
        self.tau_s = tau_s
        self._now = now
        self._junctions: dict[int, _Junction] = {}

    @property
    def heating(self) -> bool:
        return self.rth_k_per_w > 0

    def temperature(self, channel: int | None) -> float:
        """The junction temperature of the device on `channel` now (the ambient for None)."""
        if channel is None or not self.heating:
            return self.ambient_k
        return self._advance(channel).temp_k

    def set_power(self, channel: int, watts: float) -> None:
        """From now on the device on `channel` dissipates `watts` (until told otherwise)."""
        if self.heating:
            self._advance(channel).power_w = abs(watts)

    def set_ambient(self, kelvin: float) -> None:
        """A new ambient; heated junctions relax towards it with their time constant."""
        if kelvin <= 0:
            raise OptionError("temperature", f"must be above absolute zero (got {kelvin} K)")
        for channel in list(self._junctions):
            self._advance(channel)
        self.ambient_k = kelvin

    def heated_channels(self) -> list[int]:
        return [channel for channel, j in self._junctions.items() if j.power_w > 0]

    def _advance(self, channel: int) -> _Junction:
        now = self._now()
        junction = self._junctions.setdefault(channel, _Junction(self.ambient_k, 0.0, now))
        settled = self.ambient_k + junction.power_w * self.rth_k_per_w
        decay = math.exp(-max(now - junction.time_s, 0.0) / self.tau_s)
        junction.temp_k = settled + (junction.temp_k - settled) * decay
        junction.time_s = now
        return junction


def celsius_to_kelvin(celsius: float) -> float:
    return celsius + KELVIN_AT_0C
