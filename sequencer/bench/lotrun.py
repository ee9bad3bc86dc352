"""A whole run: each tray device measured, judged, stored, and only then shown.

The core yields events to a callback; rendering them is the CLI's business.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

from sequencer.judge.engine import MISSING, Judgement, judge_curve, with_bin
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import FIGURES
from sequencer.plan.segments import Plan
from sequencer.recipe.load import Recipe
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder, Smu
from sequencer.safety.rules import Guard, Trip, no_clamp_steps
from sequencer.store.runstore import RunStore


@dataclass(frozen=True)
class DeviceDone:
    index: int
    total: int
    curve: Curve
    judgement: Judgement
    seconds: float


@dataclass
class RunSummary:
    total: int
    done: int = 0
    passed: int = 0
    failed: int = 0
    guarded: int = 0  # within the guard band of a limit: neither passed nor failed
    aborted: int = 0
    seconds: float = 0.0
    status: str = "running"
    reasons: dict[str, int] = field(default_factory=dict)

    @property
    def yield_fraction(self) -> float:
        return self.passed / self.done if self.done else float("nan")

    def count(self, judgement: Judgement) -> None:
        self.done += 1
        if judgement.verdict == "pass":
            self.passed += 1
        elif judgement.verdict == "aborted":
            self.aborted += 1
        elif judgement.verdict == "guard-band":
            self.guarded += 1
        else:
            self.failed += 1
        for reason in judgement.reasons:
            key = reason.split(":")[0] if reason.startswith(("open", "short")) else _kind(reason)
            self.reasons[key] = self.reasons.get(key, 0) + 1


def _kind(reason: str) -> str:
    for name in FIGURES:
        label = name.replace("_", " ")
        if reason.startswith(label):
            return label
    return reason.split(":")[0]


def device_name(lot: str, channel: int, serials: dict[int, str] | None = None) -> str:
    """The channel's serial where the run was given a tray map, else `<lot>-NNN`."""
    if serials:
        return serials[channel]
    return f"{lot}-{channel:03d}"


def run_lot(
    recipe: Recipe,
    plan: Plan,
    smu: Smu,
    store: RunStore,
    on_device: Callable[[DeviceDone], None],
    clock: Callable[[], float] = time.monotonic,
    guard: Guard | None = None,
) -> RunSummary:
    """Measure every channel of the plan in order. Whatever ends a device early, its output is
    already off (runner) and its partial curve is stored as aborted with the reason. A device
    trip with `on_trip: skip` then goes on to the next device; anything else propagates."""
    guard = guard or make_guard(recipe, smu)
    summary = RunSummary(total=len(plan.channels))
    start = clock()
    for index, channel in enumerate(plan.channels):
        recorder = Recorder()
        device = device_name(recipe.lot, channel, recipe.tray_serials)
        t0 = clock()
        try:
            measure_device(smu, plan, channel, guard, recorder, clock)
        except BaseException as exc:
            curve = recorder.curve(device, channel, plan)
            judgement = with_bin(aborted(device, exc), recipe.judge)
            store.add_device(curve, judgement)
            summary.count(judgement)
            on_device(DeviceDone(index, len(plan.channels), curve, judgement, clock() - t0))
            summary.seconds = clock() - start
            if skips(exc, recipe):
                continue
            raise
        curve = recorder.curve(device, channel, plan)
        judgement = judge_curve(curve, recipe.judge)
        store.add_device(curve, judgement)
        summary.count(judgement)
        on_device(DeviceDone(index, len(plan.channels), curve, judgement, clock() - t0))
    summary.seconds = clock() - start
    summary.status = "completed"
    return summary


def make_guard(recipe: Recipe, smu: Smu) -> Guard:
    """The run's guard: effective limits, the SMU's interlock, the steps that must not clamp."""
    return Guard(recipe.effective_limits, smu.interlock_closed, no_clamp_steps(recipe.steps))


def skips(exc: BaseException, recipe: Recipe) -> bool:
    """Whether the run goes on after `exc` ended a device: only a device trip under `skip`."""
    return isinstance(exc, Trip) and exc.scope == "device" and recipe.on_trip == "skip"


def aborted(device: str, exc: BaseException) -> Judgement:
    why = str(exc) or type(exc).__name__
    if isinstance(exc, KeyboardInterrupt):
        why = "interrupted by the operator"
    return Judgement(device, dict.fromkeys(FIGURES, MISSING), "aborted", (f"aborted: {why}",))
