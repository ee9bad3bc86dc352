"""How one segment of a plan reaches the instrument: point by point, as an instrument-side list,
or as a search whose next level depends on the readings so far.

Every level passes `Guard.check_level` before it is sent, and every reading passes
`Guard.check_reading` after it arrives, whichever way the segment runs:
- point by point: level, check, reading, check, as before;
- a list (where the recipe says `lists: true` and the dialect has lists): every level of the
  list is checked before the list is sent; the instrument then runs the whole list, and its
  readings are checked as they come back, in order. A list is used only where nothing but an
  instrument fault could trip the guard part-way through (`list_is_safe`): no level above the
  touch-safe voltage (the interlock is read before each such level), no step that must not
  clamp, and no dissipation rating that the compliance alone would not keep. Elsewhere the
  segment goes point by point, so the guard keeps its per-point meaning. An instrument that
  does not hold its current limit is still caught, but only once its list is over;
- a search: point by point, each level from `kneesearch.next_level`.
The instrument is configured once for a run of segments with the same compliance, aperture and
settling (a list or a search after a list of the same step sends no new configuration).
"""

from __future__ import annotations

from collections.abc import Callable
from contextlib import AbstractContextManager, nullcontext
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from sequencer.plan.kneesearch import knee_reference, next_level
from sequencer.plan.segments import Plan, Segment
from sequencer.run.recorder import Recorder, Smu
from sequencer.safety.rules import Guard

MIN_LIST_POINTS = 2  # one reading is no faster as a list


@dataclass(frozen=True)
class Point:
    """One reading from a list, shaped like instruments.smu.Reading for the guard."""

    voltage_v: float
    current_a: float
    in_compliance: bool


def list_is_safe(seg: Segment, guard: Guard) -> bool:
    """Whether the guard's checks of this segment's readings can wait until the list is over."""
    lim = guard.effective
    peak = seg.peak_voltage_v
    if not peak <= lim.touch_safe_v or seg.step in guard.no_clamp_steps:  # NaN: never safe
        return False
    # With a worst-case current in the ratings, pre-flight bounds the device's dissipation by
    # that current, not by the compliance; a device drawing more trips only on its reading.
    return lim.dissipation is None or peak * seg.compliance_a <= lim.dissipation.value


@dataclass
class SegmentRun:
    """The segments of one device on one instrument; `output_on` and the configuration sent
    carry from one segment to the next."""

    smu: Smu
    plan: Plan
    guard: Guard
    recorder: Recorder
    elapsed: Callable[[], float]
    output_on: bool = False
    configured: tuple[float, float, float] | None = field(default=None)

    def run(self, index: int, seg: Segment) -> None:
        self.guard.check_level(0.0, seg.compliance_a)
        # Commands go out with the next query (the setup with its error check, each level with
        # its reading, a list's restore with the step's error check): fewer exchanges, the same
        # commands in the same order (instruments.smu.ScpiSmu.batch).
        with batch(self.smu):
            self._configure(seg)
            if seg.search is not None:
                self._search(index, seg)
            elif self._as_list(seg):
                self._list(index, seg)
            else:
                for volts in seg.levels_v:
                    self.point(index, seg, volts)
            self.smu.check_errors()

    def point(self, index: int, seg: Segment, volts: float) -> None:
        self.guard.check_level(volts, seg.compliance_a)
        self.smu.set_voltage(volts)
        self.guard.applied(volts)
        self._switch_on()
        reading = self.smu.measure()
        self.recorder.add(index, volts, reading, self.elapsed())
        self.guard.check_reading(seg.step, seg.compliance_a, reading)

    # -- internals -------------------------------------------------------------------------

    def _configure(self, seg: Segment) -> None:
        wanted = (seg.compliance_a, self.plan.nplc, seg.settle_s)
        if wanted != self.configured:
            self.configured = None  # a configuration that fails half-way is no configuration
            self.smu.configure(limit_a=seg.compliance_a, nplc=self.plan.nplc, settle_s=seg.settle_s)
            self.configured = wanted

    def _switch_on(self) -> None:
        if not self.output_on:
            self.smu.output(True)
            self.output_on = True

    def _as_list(self, seg: Segment) -> bool:
        can = getattr(self.smu, "can_run_list", None)
        if (
            not self.plan.lists
            or can is None
            or len(seg.levels_v) < MIN_LIST_POINTS
            or not can(seg.settle_s)
        ):
            return False
        return list_is_safe(seg, self.guard)

    def _list(self, index: int, seg: Segment) -> None:
        levels = seg.levels_v
        for volts in levels:
            self.guard.check_level(volts, seg.compliance_a)
        if not self.output_on:
            self.smu.set_voltage(levels[0])
            self.guard.applied(levels[0])
            self._switch_on()
        # Once the list is sent the instrument runs it to its end and stays at its last level,
        # whatever happens on this side: a shutdown from here on ramps down from there.
        self.guard.applied(levels[-1])
        started = self.elapsed()
        voltage, current, limited = self.smu.list_sweep(
            levels, limit_a=seg.compliance_a, nplc=self.plan.nplc, settle_s=seg.settle_s,
            configure=False,
        )  # fmt: skip
        times = _spread(started, self.elapsed(), len(levels))
        for k, volts in enumerate(levels):
            reading = Point(float(voltage[k]), float(current[k]), bool(limited[k]))
            self.guard.applied(volts)  # the reading is judged against its own level
            self.recorder.add(index, volts, reading, times[k])
            self.guard.check_reading(seg.step, seg.compliance_a, reading)
        self.guard.applied(levels[-1])

    def _search(self, index: int, seg: Segment) -> None:
        search = seg.search
        assert search is not None
        arrays = self._readings()
        ref = knee_reference(search, arrays["level"], arrays["voltage"], arrays["current"],
                             arrays["clamped"], arrays["spot"])  # fmt: skip
        taken = 0
        while True:
            sweep = self._readings()
            forward = ~sweep["spot"]
            good = np.isfinite(sweep["voltage"]) & np.isfinite(sweep["current"])
            good &= ~sweep["clamped"]
            level = next_level(search, ref, sweep["level"][forward], sweep["current"][forward],
                               good[forward], taken)  # fmt: skip
            if level is None:
                return
            self.point(index, seg, level)
            taken += 1

    def _readings(self) -> dict[str, Any]:
        r = self.recorder
        kinds = [self.plan.segments[s].kind for s in r.segment]
        return {
            "level": np.asarray(r.level_v, float),
            "voltage": np.asarray(r.voltage_v, float),
            "current": np.asarray(r.current_a, float),
            "clamped": np.asarray(r.in_compliance, bool),
            "spot": np.asarray([k == "spot" for k in kinds], bool),
        }


def batch(smu: Smu) -> AbstractContextManager[object]:
    """The instrument's `batch()` where it has one (a test double may not)."""
    held = getattr(smu, "batch", None)
    return held() if held is not None else nullcontext()


def _spread(start: float, end: float, count: int) -> list[float]:
    """A list's readings come back together; each is dated by its share of the run's time."""
    return [start + (end - start) * (k + 1) / count for k in range(count)]
