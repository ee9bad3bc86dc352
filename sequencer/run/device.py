"""Execute a plan on one device through an SMU. Every level passes the guard before it is sent
and every reading after it arrives; the output is ramped down and switched off on every way out
of a device (a trip, an instrument error, a signal, the end)."""

from __future__ import annotations

import logging
import time
from collections.abc import Callable

import numpy as np

from sequencer.plan.segments import Plan
from sequencer.run.recorder import Recorder, Smu
from sequencer.run.segment import SegmentRun
from sequencer.safety.rules import Guard

log = logging.getLogger(__name__)

RAMP_ABOVE_V = 5.0  # levels above this are stepped down before the output goes off
RAMP_STEP_V = 5.0


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
