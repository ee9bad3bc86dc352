"""Several instruments at once: one worker thread per SMU measures that SMU's channels, and
the calling thread judges, stores and shows every device in the plan's order.

Each lane has its own driver, its own Guard (its interlock, its last level) and switches its
own output off after each device, exactly as `runner.measure_device` does on one SMU; the
lanes share nothing but a stop flag and the queue their results go into. The store stays
single-writer: only the calling thread touches it, device by device in plan order, journal
first (a device that finishes early waits in memory for the ones before it; after a crash it
is measured again on resume, like any device not yet stored).

What stops one lane stops them all, as it would stop a one-instrument run (a run trip, an
instrument error, a signal, or a device trip under `on_trip: stop`). The others end the device
they are measuring at their next level (their guard raises `Halted`, the runner ramps down and
switches off), those devices are stored as aborted, and the first error is raised once every
lane has finished. A device trip under `on_trip: skip` only ends that device.
"""

from __future__ import annotations

import queue
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

from sequencer.bench.lotrun import DeviceDone, RunSummary, aborted, device_name, skips
from sequencer.judge.engine import judge_curve, with_bin
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder, Smu
from sequencer.safety.rules import Guard
from sequencer.store.runstore import RunStore

_DONE = "done"


class Halted(Exception):
    """Another lane, or a signal, stopped the run; this lane's device ends at its next level."""


class StopFlag(threading.Event):
    """Set once for the whole run, with the reason the devices it cuts short are stored with."""

    reason = "another instrument of the station ended the run"

    def stop(self, reason: str) -> None:
        if not self.is_set():
            self.reason = reason
            self.set()


@dataclass
class LaneGuard(Guard):
    """A lane's guard: the run's limits and this SMU's interlock, plus the shared stop flag,
    looked at before every level this lane sends."""

    stop: StopFlag = field(default_factory=StopFlag, repr=False)

    def check_level(self, volts: float, compliance_a: float) -> None:
        if self.stop.is_set():
            raise Halted(self.stop.reason)
        super().check_level(volts, compliance_a)


def why_stopped(exc: BaseException, lane: str | None = None) -> str:
    """The reason other lanes' devices are stored with when `exc` stops the run."""
    if isinstance(exc, KeyboardInterrupt):
        return "interrupted by the operator"
    if type(exc).__name__ == "Terminated":  # benchrun.Terminated: "stopped by SIGHUP", say
        return str(exc) or "stopped by a signal"
    where = f"instrument {lane}" if lane else "the run"
    return f"stopped with {where}: {exc or type(exc).__name__}"


@dataclass(frozen=True)
class Lane:
    """One SMU and the channels of the plan wired to it."""

    name: str
    smu: Smu
    guard: Guard
    channels: tuple[int, ...]


@dataclass(frozen=True)
class _Result:
    channel: int
    recorder: Recorder
    error: BaseException | None
    seconds: float


def run_parallel(
    recipe: Recipe,
    plan: Plan,
    lanes: Sequence[Lane],
    store: RunStore,
    on_device: Callable[[DeviceDone], None],
    clock: Callable[[], float] = time.monotonic,
) -> RunSummary:
    """Measure every channel of the plan, each on its lane's SMU, all lanes at once.

    Only the plan's channels are measured (a resumed pass has fewer), each lane its own in
    plan order. Lanes' guards should be LaneGuards sharing one stop flag (`lane_guards`)."""
    wanted = set(plan.channels)
    work = [(lane, tuple(c for c in plan.channels if c in lane.channels)) for lane in lanes]
    missing = wanted - {c for _, chans in work for c in chans}
    if missing:
        raise ValueError(f"channels {sorted(missing)} belong to no instrument")
    stop = _stop_flag(lanes)
    results: queue.Queue[_Result | str] = queue.Queue()
    threads = [
        threading.Thread(target=_lane, args=(recipe, plan, lane, chans, results, stop, clock),
                         name=f"lane-{lane.name}", daemon=True)
        for lane, chans in work if chans
    ]  # fmt: skip
    collector = _Collector(recipe, plan, store, on_device, clock)
    for thread in threads:
        thread.start()
    try:
        collector.collect(results, len(threads), stop)
    except BaseException as exc:
        stop.stop(why_stopped(exc))  # a signal or a store error: every lane ends its device
        collector.drain(results)
        raise
    finally:
        for thread in threads:
            thread.join()
    collector.finish()
    return collector.summary


def lane_guards(guards: Sequence[Guard]) -> list[LaneGuard]:
    """The guards of one parallel run, sharing one stop flag."""
    stop = StopFlag()
    return [
        LaneGuard(g.limits, g.interlock_closed, g.no_clamp_steps, g.level_v, stop=stop)
        for g in guards
    ]


def _stop_flag(lanes: Sequence[Lane]) -> StopFlag:
    flags = {id(lane.guard.stop) for lane in lanes if isinstance(lane.guard, LaneGuard)}
    if len(flags) != 1 or not all(isinstance(lane.guard, LaneGuard) for lane in lanes):
        raise ValueError("every lane needs a LaneGuard, all sharing one stop flag (lane_guards)")
    guard = lanes[0].guard
    assert isinstance(guard, LaneGuard)
    return guard.stop


def _lane(recipe, plan, lane: Lane, channels, results: queue.Queue, stop, clock) -> None:
    """A worker: the lane's channels in order until done or stopped; always reports done."""
    try:
        for channel in channels:
            if stop.is_set():
                break
            recorder, started, error = Recorder(), clock(), None
            try:
                measure_device(lane.smu, plan, channel, lane.guard, recorder, clock)
            except BaseException as exc:  # reported to the collector, who decides
                error = exc
            results.put(_Result(channel, recorder, error, clock() - started))
            if error is not None and not skips(error, recipe):
                stop.stop(why_stopped(error, lane.name))
                break
    finally:
        results.put(_DONE)


@dataclass
class _Collector:
    """The calling thread's side: results in, devices judged and stored in plan order."""

    recipe: Recipe
    plan: Plan
    store: RunStore
    on_device: Callable[[DeviceDone], None]
    clock: Callable[[], float]
    summary: RunSummary = field(init=False)
    waiting: dict[int, _Result] = field(default_factory=dict)
    next_index: int = 0
    first_error: BaseException | None = None
    lanes_left: int = 0

    def __post_init__(self) -> None:
        self.summary = RunSummary(total=len(self.plan.channels))
        self.start = self.clock()
        self.order = {channel: k for k, channel in enumerate(self.plan.channels)}

    def collect(self, results: queue.Queue, lanes: int, stop: StopFlag) -> None:
        self.lanes_left = lanes
        while self.lanes_left:
            self._take(results.get(), stop)
        self._store_rest()

    def drain(self, results: queue.Queue) -> None:
        """After an error on this side: wait for every lane, store what they measured."""
        while self.lanes_left:
            item = results.get()
            if item == _DONE:
                self.lanes_left -= 1
            else:
                self.waiting[self.order[item.channel]] = item
        self._store_rest()

    def finish(self) -> None:
        self.summary.seconds = self.clock() - self.start
        if self.first_error is not None:
            raise self.first_error
        self.summary.status = "completed"

    def _take(self, item: _Result | str, stop: StopFlag) -> None:
        if item == _DONE:
            self.lanes_left -= 1
            return
        assert isinstance(item, _Result)
        error = item.error
        if error is not None and not skips(error, self.recipe):
            stop.stop(why_stopped(error))
            if self.first_error is None and not isinstance(error, Halted):
                self.first_error = error
        self.waiting[self.order[item.channel]] = item
        while self.next_index in self.waiting:
            self._store(self.waiting.pop(self.next_index))
            self.next_index += 1

    def _store_rest(self) -> None:
        """Devices that were measured while an earlier one never was (its lane stopped)."""
        for index in sorted(self.waiting):
            self._store(self.waiting.pop(index))

    def _store(self, item: _Result) -> None:
        device = device_name(self.recipe.lot, item.channel, self.recipe.tray_serials)
        curve = item.recorder.curve(device, item.channel, self.plan)
        if item.error is None:
            judgement = judge_curve(curve, self.recipe.judge)
        else:
            judgement = with_bin(aborted(device, item.error), self.recipe.judge)
        self.store.add_device(curve, judgement)
        self.summary.count(judgement)
        index = self.order[item.channel]
        self.on_device(DeviceDone(index, len(self.plan.channels), curve, judgement, item.seconds))
        self.summary.seconds = self.clock() - self.start
