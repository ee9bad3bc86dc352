"""A run over temperatures: the chamber is opened beside the SMU; before each round (one round per
set point) it soaks, the temperatures go to the store, and every ending leaves the chamber safe.

Round n runs at the recipe's n-th set point, so a resumed run goes on at the set point it was at.
The simulated chamber's time runs `speed` times the wall clock, so on it the soak's clock does
too: its poll and its timeout are then counted on the chamber's own time line.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import TYPE_CHECKING

from sequencer.model.errors import RunError
from sequencer.recipe.chamberspec import SIM_RESOURCE
from sequencer.recipe.load import Recipe
from sequencer.recipe.repeat import Repeat
from sequencer.run.soak import leave_safe, soak

if TYPE_CHECKING:
    from instruments.chamberlink import ChamberConnection
    from sequencer.store.runstore import RunStore


def schedule(recipe: Recipe, repeat: Repeat | None) -> Repeat | None:
    """One round per set point, straight after one another; a schedule beside it is refused."""
    if not recipe.temperatures:
        return repeat
    if repeat is not None:
        raise RunError(
            f"{recipe.file}: 'temperatures:' and a repeat schedule cannot be combined yet: "
            "remove 'repeat:' (or --every/--for/--rounds); each set point is one round"
        )
    return Repeat(0.0, None, len(recipe.temperatures))


class TemperatureRun:
    """The chamber side of one run; `end()` must be called however the run ends."""

    def __init__(self, recipe: Recipe, sim: bool, announce: Callable[[str], None]) -> None:
        from instruments.chamberlink import connect_chamber  # start-up speed: loads pyvisa

        spec = recipe.station.chamber
        assert spec is not None  # pre-flight refused set points without a chamber
        self.recipe, self.spec, self.announce = recipe, spec, announce
        resource = SIM_RESOURCE if sim else spec.resource
        options = spec.simulator_options if resource == SIM_RESOURCE else None
        self.speed = float(options.get("speed", 1.0)) if options else 1.0  # type: ignore[arg-type]
        self.link: ChamberConnection = connect_chamber(
            resource, dialect=spec.dialect, timeout_s=spec.timeout_s, sim_options=options
        )
        announce(f"chamber: {self.link.chamber.identify()} at {self.link.chamber.resource}")

    def before_round(self, store: RunStore) -> None:
        points = self.recipe.temperatures
        point = points[min(store.round_no, len(points)) - 1]
        self.announce(f"set point {store.round_no} of {len(points)}: {point.describe()}")
        done = soak(
            self.link.chamber, point, self.spec, now=self._now, sleep=self._sleep,
        )  # fmt: skip
        fixture = "" if done.fixture_c is None else f", fixture {done.fixture_c:.2f} degC"
        self.announce(
            f"stable at {point.celsius:g} degC: chamber {done.chamber_c:.2f} degC{fixture}"
        )
        store.at_temperature(point.celsius, done.chamber_c, done.fixture_c)

    def end(self) -> str:
        try:
            return leave_safe(self.link.chamber, self.spec)
        finally:
            self.link.close()

    def _now(self) -> float:
        return time.monotonic() * self.speed

    def _sleep(self, seconds: float) -> None:
        time.sleep(seconds / self.speed)


@contextmanager
def chamber_in_the_loop(
    recipe: Recipe, sim: bool, announce: Callable[[str], None], ended: Callable[[str], None]
) -> Iterator[TemperatureRun | None]:
    """The chamber for the block (None without set points); `ended(line)` gets its last state,
    after everything inside, the SMU's shutdown included, has run."""
    if not recipe.temperatures:
        yield None
        return
    run = TemperatureRun(recipe, sim, announce)
    try:
        yield run
    finally:
        ended(run.end())
