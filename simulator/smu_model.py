"""What the SMU does: source a voltage with a clamping current limit, and measure.

Measurement model (documented here because a driver's tests depend on it):
- Clamp: when the device would draw more than the limit at the programmed level, the SMU turns
  into a current source at +/-limit; the reading is the voltage where the device draws exactly
  the limit, and `Reading.limited` is set (the instrument maps it to QUES bit 1).
- Current ranges 1 uA .. 100 mA. Auto range picks the smallest range >= |I|; a fixed range flags
  readings above 1.05 x range as overflow, reported as +/-9.9E+37 (SCPI INF/NINF).
- Gaussian noise, seeded: 5 ppm of range (current) and 50 uV (voltage) at 1 NPLC, scaling with
  1/sqrt(NPLC) as averaging over a longer aperture would; then rounded to 1 ppm of range and
  10 uV.
- Time: each acquisition costs trigger delay + NPLC / line frequency on the injected clock.
- Output off, or nothing connected: the true voltage and current are 0 (the reading is noise).
- The device is evaluated at the junction temperature the instrument passes in.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from simulator.clock import Clock
from simulator.devices import TNOM_K, Device

CURRENT_RANGES_A = (1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 1e-1)
OVERRANGE = 1.05
OVERFLOW_READING = 9.9e37
CURRENT_NOISE_OF_RANGE = 5e-6
VOLTAGE_NOISE_V = 50e-6
CURRENT_RESOLUTION_OF_RANGE = 1e-6
VOLTAGE_RESOLUTION_V = 1e-5
DEFAULT_LIMIT_A = 1e-3
POINTWISE_LEVELS = 32  # lists up to this long are solved level by level (see true_list)
Truth = tuple[float, float, bool]  # noiseless volts, amps, current limit active
TruthArrays = tuple[np.ndarray, np.ndarray, np.ndarray]  # the same for a list of levels


@dataclass(frozen=True)
class Reading:
    voltage_v: float
    current_a: float
    limited: bool  # the current limit was active
    overflow: bool  # the current exceeded the fixed range
    range_a: float


def range_for(current_a: float) -> float:
    """The smallest current range that holds |current|, else the largest."""
    for upper in CURRENT_RANGES_A:
        if abs(current_a) <= upper:
            return upper
    return CURRENT_RANGES_A[-1]


class Smu:
    """Source and measurement state of one voltage-source SMU channel."""

    def __init__(self, clock: Clock, rng: np.random.Generator, line_frequency_hz: float) -> None:
        self.clock = clock
        self.rng = rng
        self.line_frequency_hz = line_frequency_hz
        self.applied_levels: list[float] = []  # every level the output carried, in order
        self.station_error(0.0, 0.0, 0.0, 0)
        self.reset()

    def station_error(self, gain: float, offset: float, spread: float, noise_seed: int) -> None:
        """How this station reads currents (kept through *RST: it is the station, not a
        setting): I_read = I (1 + gain + contact) + offset x range, contact drawn per contact
        (an offset is a fraction of the range, as instrument offsets are specified)."""
        self.gain, self.offset, self.contact_spread = gain, offset, spread
        self.noise_seed = noise_seed
        self.contact = 0.0

    def new_contact(self) -> None:
        # Drawn only when a spread is set, so that without one the noise stream is unchanged.
        if self.contact_spread > 0:
            self.contact = float(self.rng.normal(0.0, self.contact_spread))

    def _as_read(self, amps, range_a):
        return amps * (1.0 + self.gain + self.contact) + self.offset * range_a

    def reset(self) -> None:
        """*RST state: output off, 0 V, 1 mA limit, 1 NPLC, no delay, auto range."""
        self.output_on = False
        self.level_v = 0.0
        self.limit_a = DEFAULT_LIMIT_A
        self.nplc = 1.0
        self.trigger_delay_s = 0.0
        self.range_auto = True
        self.range_a = CURRENT_RANGES_A[-1]
        self.sense_functions: tuple[str, ...] = ("VOLT", "CURR")
        self.mode = "FIXed"  # or "LIST": INITiate steps through list_v
        self.list_v: tuple[float, ...] = ()
        self.trigger_count = 1

    @property
    def aperture_s(self) -> float:
        return self.nplc / self.line_frequency_hz

    def set_list(self, levels: tuple[float, ...]) -> None:
        self.list_v = levels

    def set_output(self, on: bool) -> None:
        self.output_on = on
        if on:
            self.applied_levels.append(self.level_v)

    def set_level(self, volts: float) -> None:
        self.level_v = volts
        if self.output_on:
            self.applied_levels.append(volts)

    def set_fixed_range(self, amps: float) -> None:
        self.range_a = range_for(amps)
        self.range_auto = False

    def max_applied_v(self) -> float:
        return max((abs(v) for v in self.applied_levels), default=0.0)

    def measure(
        self, device: Device | None, temp_k: float = TNOM_K, truth: Truth | None = None
    ) -> Reading:
        """One acquisition of (V, I) on the connected device (None: nothing connected).

        `truth` is the noiseless (V, I, limited) when the caller has solved it already."""
        self.clock.spend(self.trigger_delay_s + self.aperture_s)
        volts, amps, limited = truth if truth is not None else self.true_output(device, temp_k)
        if self.range_auto:
            self.range_a = range_for(amps)
        range_a = self.range_a
        scale = 1.0 / math.sqrt(self.nplc)
        v_noise, i_noise = (self.rng.normal(0.0, 1.0, 2) * scale).tolist()
        v = _round(volts + v_noise * VOLTAGE_NOISE_V, VOLTAGE_RESOLUTION_V)
        i = self._as_read(amps, range_a) + i_noise * CURRENT_NOISE_OF_RANGE * range_a
        i = _round(i, CURRENT_RESOLUTION_OF_RANGE * range_a)
        overflow = abs(i) > OVERRANGE * range_a
        if overflow:
            i = math.copysign(OVERFLOW_READING, i)
        return Reading(v, i, limited, overflow, range_a)

    def true_list(self, device: Device, levels: list[float], temp_k: float) -> TruthArrays:
        """true_output at each level (output on, same limit) as arrays (volts, amps, limited):
        one vectorised solve, or for a short list one solve a level, which costs less than
        numpy's per-call overhead there."""
        if len(levels) <= POINTWISE_LEVELS:
            truths = [self._truth(device, v, temp_k) for v in levels]
            volts, amps, limited = zip(*truths, strict=True)
            return np.array(volts), np.array(amps), np.array(limited, dtype=bool)
        volts = np.array(levels, dtype=float)
        amps = np.asarray(device.current(volts, temp_k), dtype=float)
        limited = np.abs(amps) > self.limit_a
        clamp = np.copysign(self.limit_a, amps)
        if limited.any():
            volts[limited] = device.voltage_at(clamp[limited], volts[limited], temp_k)
        return volts, np.where(limited, clamp, amps), limited

    def measure_list(self, levels: list[float], truth: TruthArrays) -> list[Reading]:
        """Step through `levels`, one acquisition at each, given their noiseless terminal values
        (true_list): what `set_level` then `measure` at each level in turn gives, the same
        noise draws in the same order, the same time spent and the same last range, with the
        noise and rounding done on arrays."""
        volts, amps, limited = truth
        per_reading = self.trigger_delay_s + self.aperture_s
        for level in levels:
            self.set_level(level)
            self.clock.spend(per_reading)
        if self.range_auto:
            ranges = np.array([range_for(a) for a in amps.tolist()])
            self.range_a = float(ranges[-1])
        else:
            ranges = np.full(len(levels), self.range_a)
        scale = 1.0 / math.sqrt(self.nplc)
        noise = self.rng.normal(0.0, 1.0, 2 * len(levels)) * scale  # (v, i) pairs, in turn
        v = _rounded(volts + noise[0::2] * VOLTAGE_NOISE_V, VOLTAGE_RESOLUTION_V)
        i = self._as_read(amps, ranges) + noise[1::2] * CURRENT_NOISE_OF_RANGE * ranges
        i = _rounded(i, CURRENT_RESOLUTION_OF_RANGE * ranges)
        overflow = np.abs(i) > OVERRANGE * ranges
        i = np.where(overflow, np.copysign(OVERFLOW_READING, i), i)
        columns = (v, i, limited, overflow, ranges)
        return [Reading(*row) for row in zip(*(c.tolist() for c in columns), strict=True)]

    def true_output(self, device: Device | None, temp_k: float = TNOM_K) -> Truth:
        """(V, I, limited) at the terminals without noise: what the device really sees."""
        if not self.output_on or device is None:
            return 0.0, 0.0, False
        return self._truth(device, self.level_v, temp_k)

    def _truth(self, device: Device, volts: float, temp_k: float) -> Truth:
        amps = device.point_current(volts, temp_k)
        if abs(amps) <= self.limit_a:
            return volts, amps, False
        clamp = math.copysign(self.limit_a, amps)
        return device.point_voltage_at(clamp, volts, temp_k), clamp, True


def _round(value: float, step: float) -> float:
    # round(x, 0) rounds half to even, exactly, as np.round does, without numpy's scalar cost
    return round(value / step, 0) * step


def _rounded(values: np.ndarray, step: np.ndarray | float) -> np.ndarray:
    """`_round` elementwise."""
    return np.round(values / step) * step


@contextmanager
def noiseless() -> Iterator[None]:
    """Reading noise off in this process (readings are still rounded to the resolution): for
    comparisons whose only difference should be the plan, in tests and benchmarks."""
    global CURRENT_NOISE_OF_RANGE, VOLTAGE_NOISE_V
    saved = CURRENT_NOISE_OF_RANGE, VOLTAGE_NOISE_V
    CURRENT_NOISE_OF_RANGE = VOLTAGE_NOISE_V = 0.0
    try:
        yield
    finally:
        CURRENT_NOISE_OF_RANGE, VOLTAGE_NOISE_V = saved
