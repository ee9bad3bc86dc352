"""Soaking at a set point on the simulated chamber as a child process (its time line is the wall
clock times its speed, so the run's clock here is too): settles, times out when the chamber
cannot get there, stops at an open door, and every ending leaves the chamber safe or says not."""

from __future__ import annotations

import time
from itertools import pairwise

import pytest

from instruments.chamberlink import connect_chamber
from sequencer.model.errors import RunError
from sequencer.recipe.chamberspec import ChamberSpec
from sequencer.recipe.temperatures import SetPoint
from sequencer.run.soak import leave_safe, soak

SPEED = 3000.0
SPEC = ChamberSpec(
    resource="sim", dialect="chamber_text", timeout_s=2.0, lowest_c=-40.0, highest_c=125.0,
    rate_k_per_s=1.0, safe_c=25.0,
)  # fmt: skip
HOT = SetPoint(celsius=60.0, band_k=0.5, soak_s=120.0, timeout_s=3600.0)


def now() -> float:
    return time.monotonic() * SPEED


def sleep(seconds: float) -> None:
    time.sleep(seconds / SPEED)


@pytest.fixture
def chamber():
    options = {"speed": SPEED, "tau_air": 60, "tau_mount": 300, "room": 23}
    with connect_chamber("sim", sim_options=options) as link:
        yield link.chamber


def test_the_chamber_settles_within_the_band(chamber):
    seen: list[str] = []
    done = soak(chamber, HOT, SPEC, now=now, sleep=sleep, report=seen.append)
    assert abs(done.chamber_c - 60.0) <= 0.5 and chamber.read_set_point() == 60.0
    assert done.waited_s >= 37.0 + 120.0  # 37 K at 1 K/s, then at least 120 s in band
    assert done.fixture_c is not None and done.fixture_c < done.chamber_c  # the mount lags
    assert any(line.startswith("within 0.5 K of 60 degC") for line in seen)


def test_a_chamber_that_cannot_get_there_times_out_with_one_line(chamber):
    chamber.transport.write("SIM:FAULT weak,1")  # gets no further than 20 K from the room
    point = SetPoint(celsius=60.0, band_k=0.5, soak_s=120.0, timeout_s=1800.0)
    with pytest.raises(RunError, match=r"did not settle at 60 degC within 1800 s \(it reads 4[23]"):
        soak(chamber, point, SPEC, now=now, sleep=sleep)
    assert leave_safe(chamber, SPEC).startswith("chamber set to 25 degC (read back)")


def test_an_open_door_stops_the_soak(chamber):
    chamber.transport.write("SIM:FAULT door,1")
    with pytest.raises(RunError, match="door is open"):
        soak(chamber, HOT, SPEC, now=now, sleep=sleep)


def test_a_silent_chamber_is_reported_not_raised_at_the_end(chamber):
    chamber.transport.write("SIM:FAULT mute,1")
    chamber.transport.timeout_s = 0.3
    line = leave_safe(chamber, SPEC)
    assert line.startswith("THE CHAMBER MAY NOT BE AT ITS SAFE SET POINT")


class SteppedChamber:
    """A chamber whose air jumps to each set point at once, on a clock moved only by sleep():
    the ramp alone then decides every set point sent (no wire, no wall clock)."""

    def __init__(self) -> None:
        self.t = 0.0
        self.point = 23.0
        self.sent: list[tuple[float, float]] = []

    def now(self) -> float:
        return self.t

    def sleep(self, seconds: float) -> None:
        self.t += seconds

    def set_point(self, celsius: float) -> float:
        self.sent.append((self.t, celsius))
        self.point = celsius
        return celsius

    def read_set_point(self) -> float:
        return self.point

    def temperature(self) -> float:
        return self.point

    def fixture_temperature(self) -> float | None:
        return None

    def start(self) -> None:
        pass

    def door_open(self) -> bool | None:
        return False

    def make_safe(self, celsius: float | None) -> str:
        return "safe"


def test_the_set_point_moves_at_the_station_rate_then_soaks():
    fake = SteppedChamber()
    done = soak(fake, HOT, SPEC, now=fake.now, sleep=fake.sleep)
    times, points = zip(*fake.sent, strict=True)
    assert points[-1] == 60.0 and len(points) > 3
    slopes = [(b - a) / (tb - ta) for (ta, a), (tb, b) in pairwise(fake.sent)]
    assert max(slopes) <= SPEC.rate_k_per_s + 1e-12  # never faster than the station allows
    assert times[-1] == pytest.approx(37.0, abs=5.0)  # 37 K at 1 K/s, in 5 s polls
    assert done.waited_s - times[-1] >= HOT.soak_s
