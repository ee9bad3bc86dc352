"""Recipes and stations: YAML text in, frozen dataclasses of SI floats out.

Everything a run needs is validated here, before any instrument is touched; each message names
the file, the line and the field, what was expected and what came.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

from sequencer.judge.devicetempco import TempCoLimits
from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy
from sequencer.model.judgesettings import FIGURE_KIND, FIGURES, FigureLimit, JudgeSettings
from sequencer.recipe.chamberspec import ChamberSpec
from sequencer.recipe.figuresstep import check_against_judge
from sequencer.recipe.instrumentspec import InstrumentSpec
from sequencer.recipe.limits import (
    EffectiveLimits,
    Limits,
    Ratings,
    RecipeLimits,
    effective_limits,
)
from sequencer.recipe.repeat import Repeat
from sequencer.recipe.resultsdb import SharedDatabase
from sequencer.recipe.retest import RetestPolicy
from sequencer.recipe.steps import FiguresStep, SpotStep, Step, SweepStep
from sequencer.recipe.temperatures import SetPoint
from sequencer.recipe.yamlsource import load_yaml

__all__ = [
    "FIGURES",
    "FIGURE_KIND",
    "FigureLimit",
    "FiguresStep",
    "JudgeSettings",
    "Recipe",
    "SpotStep",
    "Station",
    "Step",
    "SweepStep",
]


@dataclass(frozen=True)
class Station:
    name: str
    file: str
    resource: str
    dialect: str
    timeout_s: float
    line_frequency_hz: float
    channels: tuple[int, ...]
    limits: Limits
    interlocked_fixture: bool
    simulator: tuple[tuple[str, object], ...] = ()
    text: str = ""
    accuracy: Accuracy = DEFAULT_ACCURACY
    results_database: SharedDatabase | None = None  # a shared store besides the run folder
    # Every SMU with its channels (sequencer.recipe.instrumentspec); the fields above name the
    # first.
    instruments: tuple[InstrumentSpec, ...] = ()
    chamber: ChamberSpec | None = None  # the temperature source (sequencer.recipe.chamberspec)

    @property
    def simulator_options(self) -> dict[str, object]:
        """The embedded simulator's options: the station's `simulator:` keys, holding as many
        devices as the tray has channels unless `devices` says otherwise."""
        return {"devices": max(self.channels, default=1)} | dict(self.simulator)


@dataclass(frozen=True)
class Recipe:
    file: str
    product: str
    lot: str
    station: Station
    nplc: float
    steps: tuple[Step, ...]
    judge: JudgeSettings
    operator: str = ""
    text: str = ""
    limits: RecipeLimits = field(default_factory=RecipeLimits)
    ratings: Ratings = field(default_factory=Ratings)
    on_trip: str = "stop"  # after a device trip: "stop" the run, or "skip" to the next device
    hazardous_voltage_acknowledged: bool = False
    repeat: Repeat | None = None  # rounds over the tray on a schedule; None: one round
    part_by_part: RetestPolicy = field(default_factory=RetestPolicy)  # --part-by-part
    lists: bool = False  # run steps as instrument-side lists where safe (sequencer.run.segment)
    temperatures: tuple[SetPoint, ...] = ()  # set points to run the steps at (recipe.temperatures)
    tempco: TempCoLimits = field(default_factory=TempCoLimits)  # recipe.format.recipe TempCo
    # channel -> serial for a tray run, given at run time (recipe.traymap); empty: <lot>-NNN
    tray_serials: dict[int, str] = field(default_factory=dict, compare=False, hash=False)

    @property
    def effective_limits(self) -> EffectiveLimits:
        """The smallest of station, recipe and device-rating limits (sequencer.recipe.limits)."""
        return effective_limits(self.station.limits, self.limits, self.ratings)

    @property
    def digest(self) -> str:
        """SHA-256 of the recipe and station text: what a stored result was produced under."""
        return hashlib.sha256((self.text + "\0" + self.station.text).encode()).hexdigest()


# --- station ------------------------------------------------------------------------------------


def load_station(path: Path) -> Station:
    """Load and validate a station file: its format (format.station), then the rules that span
    its instruments (stationbuild.check_instruments_together)."""
    # Start-up speed: the formats build pydantic models at import; only loading a file needs them.
    from sequencer.recipe import stationbuild as build
    from sequencer.recipe.format.errors import validated
    from sequencer.recipe.format.station import StationFile

    source = load_yaml(path)
    station = validated(StationFile, source, source.data)
    specs = build.instrument_specs(source, station, path.parent)
    first = specs[0]
    return Station(
        station.station,
        str(path),
        first.resource,
        first.dialect,
        first.timeout_s,
        first.line_frequency_hz,
        tuple(c for spec in specs for c in spec.channels),
        build.station_limits(station.limits),
        station.fixture.interlocked,
        build.simulator_options(station.simulator),
        source.text,
        build.accuracy(station.accuracy),
        build.shared_database(station.results_database),
        specs,
        build.chamber(station.chamber),
    )


# --- recipe -------------------------------------------------------------------------------------


def load_recipe(path: Path, *, station_path: Path | None = None) -> Recipe:
    """Load and validate a recipe and the station it names (or `station_path` instead): the
    format (format.recipe), then the rules that span sections and files (recipebuild)."""
    # Start-up speed: the formats build pydantic models at import; only loading a file needs them.
    from sequencer.recipe import recipebuild as build
    from sequencer.recipe.format.errors import validated
    from sequencer.recipe.format.recipe import RecipeFile

    source = load_yaml(path)
    recipe = validated(RecipeFile, source, source.data)
    station = load_station(station_path or (path.parent / recipe.station))
    steps = build.steps(source, recipe.steps)
    judge = build.judge(source, recipe.judge, station.accuracy)
    check_against_judge(source, steps, judge)  # cross-field: figures steps below the knee window
    return Recipe(
        str(path),
        recipe.product,
        recipe.lot,
        station,
        recipe.nplc,
        steps,
        judge,
        recipe.operator,
        source.text,
        limits=build.recipe_limits(source, recipe.limits, station.limits),
        ratings=build.ratings(recipe.ratings),
        on_trip=recipe.on_trip,
        hazardous_voltage_acknowledged=recipe.hazardous_voltage is not None,
        repeat=build.repeat(recipe.repeat),
        part_by_part=build.part_by_part(recipe.part_by_part),
        lists=recipe.lists,
        temperatures=build.temperatures(recipe.temperatures),
        tempco=build.tempco(recipe.tempco),
    )
