"""Execute a plan on one device through an SMU. Every level passes the guard before it is sent
and every reading after it arrives; the output is ramped down and switched off on every way out
of a device (a trip, an instrument error, a signal, the end)."""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

from sequencer.model.curve import Curve
from sequencer.plan.make import Plan
from sequencer.run.segment import SegmentRun
from sequencer.safety.rules import Guard

log = logging.getLogger(__name__)

RAMP_ABOVE_V = 5.0  # levels above this are stepped down before the output goes off
RAMP_STEP_V = 5.0


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


def ramp_levels(from_v: float) -> list[float]:
    """Levels that bring the output from `from_v` to 0 V in steps of at most RAMP_STEP_V."""
    if abs(from_v) <= RAMP_ABOVE_V:
        return [0.0]
    steps = int(np.ceil(abs(from_v) / RAMP_STEP_V))
    return [float(v) for v in np.linspace(from_v, 0.0, steps + 1)[1:]]


def measure_device(
    smu: Smu,
    plan: Plan,
    channel: int,
    guard: Guard,
    recorder: Recorder,
    clock: Callable[[], float] = time.monotonic,
) -> None:
    """Run every segment of the plan on one tray channel, filling `recorder` (point by point,
    as instrument-side lists, or as a search: sequencer.run.segment).

    A clamped reading is recorded with its flag (the judge leaves it out of the figures); the
    guard trips on it only in a step that must not clamp. The instrument's error queue is read
    after each step, so a refused command cannot pass unnoticed for longer than one step.
    """
    smu.select_channel(channel)
    start = clock()
    guard.applied(0.0)
    try:
        run = SegmentRun(smu, plan, guard, recorder, lambda: clock() - start)
        for index, seg in enumerate(plan.segments):
            run.run(index, seg)
    except BaseException:
        _switch_off_after(smu, guard)
        raise
    switch_off(smu, guard.level_v, guard.applied)


def _switch_off_after(smu: Smu, guard: Guard) -> None:
    """Switch off while another error is on its way out: a failure here must not replace it
    (the caller reads the output back and reconnects if needed)."""
    try:
        switch_off(smu, guard.level_v, guard.applied)
    except Exception as exc:
        log.warning("output off after an error failed too: %s", exc)


def switch_off(
    smu: Smu, level_v: float, applied: Callable[[float], None] = lambda volts: None
) -> None:
    """Ramp down from `level_v` and switch the output off; the output-off is always attempted,
    even when a ramp step fails. `applied` hears of every level written."""
    try:
        for volts in ramp_levels(level_v):
            smu.set_voltage(volts)
            applied(volts)
    finally:
        smu.output(False)
