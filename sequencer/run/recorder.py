"""What a device's run works with: the `Smu` it drives (instruments.smu.ScpiSmu provides it) and
the `Recorder` that keeps every reading as it arrives. Shared by the device and segment runners."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

from sequencer.model.curve import Curve
from sequencer.plan.segments import Plan


class Reading(Protocol):
    voltage_v: float
    current_a: float
    in_compliance: bool


class Smu(Protocol):
    """What the runner needs of an instrument (instruments.smu.ScpiSmu provides it)."""

    def configure(
        self, *, limit_a: float, nplc: float, settle_s: float, current_range_a: float | None = None
    ) -> None: ...
    def set_voltage(self, volts: float) -> None: ...
    def output(self, on: bool) -> None: ...
    def measure(self) -> Reading: ...
    def select_channel(self, channel: int) -> None: ...
    def interlock_closed(self) -> bool: ...
    def check_errors(self) -> None: ...
    def output_is_on(self) -> bool: ...
    def safe_state(self) -> bool: ...


@dataclass
class Recorder:
    """Points as they arrive, so that an interrupted device keeps what it measured."""

    segment: list[int] = field(default_factory=list)
    level_v: list[float] = field(default_factory=list)
    voltage_v: list[float] = field(default_factory=list)
    current_a: list[float] = field(default_factory=list)
    time_s: list[float] = field(default_factory=list)
    in_compliance: list[bool] = field(default_factory=list)

    def add(self, seg: int, level: float, reading: Reading, t: float) -> None:
        self.segment.append(seg)
        self.level_v.append(level)
        self.voltage_v.append(reading.voltage_v)
        self.current_a.append(reading.current_a)
        self.time_s.append(t)
        self.in_compliance.append(bool(reading.in_compliance))

    def curve(self, device: str, channel: int, plan: Plan) -> Curve:
        return Curve(
            device=device,
            channel=channel,
            steps=tuple(s.step for s in plan.segments),
            kinds=tuple(s.kind for s in plan.segments),
            segment=np.asarray(self.segment, dtype=int),
            level_v=np.asarray(self.level_v, dtype=float),
            voltage_v=np.asarray(self.voltage_v, dtype=float),
            current_a=np.asarray(self.current_a, dtype=float),
            time_s=np.asarray(self.time_s, dtype=float),
            in_compliance=np.asarray(self.in_compliance, dtype=bool),
        )
