"""Bring the chamber to one set point, ramped at the station's rate, and wait until it is stable.

The chamber comes in as a small protocol (instruments.chamber.TextChamber provides it), and time
as two functions, so a test can drive it on a simulated chamber's own time line. A soak that has
not settled by its timeout, or a door that opens, ends the run with one line naming the set point
and what the chamber read; the caller then leaves the SMU off and the chamber safe.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

from sequencer.judge.soak import SoakTracker
from sequencer.model.errors import RunError
from sequencer.recipe.chamberspec import ChamberSpec
from sequencer.recipe.temperatures import SetPoint
from sequencer.safety.chamber import ramp_set_point

POLL_S = 5.0  # how often the chamber is read while soaking, on the chamber's time line


class Chamber(Protocol):
    def set_point(self, celsius: float) -> float: ...

    def read_set_point(self) -> float: ...

    def temperature(self) -> float: ...

    def fixture_temperature(self) -> float | None: ...

    def start(self) -> None: ...

    def door_open(self) -> bool | None: ...

    def make_safe(self, celsius: float | None) -> str: ...


@dataclass(frozen=True)
class Soaked:
    """Where a set point was reached: the readings when it became stable."""

    set_point_c: float
    chamber_c: float
    fixture_c: float | None
    waited_s: float


def soak(
    chamber: Chamber,
    point: SetPoint,
    spec: ChamberSpec,
    *,
    now: Callable[[], float],
    sleep: Callable[[float], None],
    report: Callable[[str], None] = lambda _text: None,
) -> Soaked:
    """Ramp to `point`, then wait for its soak rule; RunError on timeout or an open door."""
    start = last = now()
    current = chamber.read_set_point()
    chamber.start()
    tracker = SoakTracker(point.celsius, point.band_k, point.soak_s)
    while True:
        t = now()
        if current != point.celsius:
            current = chamber.set_point(ramp_set_point(current, point.celsius, spec.rate_k_per_s,
                                                       t - last))  # fmt: skip
        last = t
        _check_door(chamber, point)
        reading = chamber.temperature()
        if current == point.celsius and tracker.feed(t, reading):
            return Soaked(point.celsius, reading, chamber.fixture_temperature(), t - start)
        if t - start > point.timeout_s:
            raise RunError(
                f"the chamber did not settle at {point.celsius:g} degC within "
                f"{point.timeout_s:g} s (it reads {reading:.2f} degC, {tracker.describe()}): "
                "check the chamber can reach that temperature, or lengthen the soak timeout"
            )
        report(tracker.describe())
        sleep(POLL_S)


def _check_door(chamber: Chamber, point: SetPoint) -> None:
    if chamber.door_open():
        raise RunError(
            f"the chamber door is open while soaking at {point.celsius:g} degC: close it and "
            "resume the run"
        )


def leave_safe(chamber: Chamber, spec: ChamberSpec) -> str:
    """The chamber's part of every ending, after the SMU output is off: the station's safe set
    point, read back, or stopped. Never raises (it runs while another error is handled): the one
    line it returns says what the chamber reads, or that its state is unknown."""
    try:
        return chamber.make_safe(spec.safe_c)
    except Exception as exc:  # an ending must still report; the line says what is at stake
        return f"THE CHAMBER MAY NOT BE AT ITS SAFE SET POINT: {exc}; set it at the chamber"
