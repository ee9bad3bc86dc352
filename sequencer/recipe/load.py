"""Recipes and stations: YAML text in, frozen dataclasses of SI floats out.

Everything a run needs is validated here, before any instrument is touched; each message names
the file, the line and the field, what was expected and what came.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy
from sequencer.model.judgesettings import FIGURE_KIND, FIGURES, FigureLimit, JudgeSettings
from sequencer.recipe.chamberspec import ChamberSpec, parse_chamber
from sequencer.recipe.fields import Fields as _Fields
from sequencer.recipe.fields import positive as _positive
from sequencer.recipe.fields import show as _show
from sequencer.recipe.figuresstep import FiguresStep, check_against_judge, parse_figures
from sequencer.recipe.instrumentspec import InstrumentSpec, instrument_specs
from sequencer.recipe.judgeconfig import parse_accuracy, parse_judge
from sequencer.recipe.limits import (
    ON_COMPLIANCE,
    ON_TRIP,
    EffectiveLimits,
    Limits,
    Ratings,
    RecipeLimits,
    effective_limits,
    parse_acknowledgement,
    parse_choice,
    parse_ratings,
    parse_recipe_limits,
    parse_station_limits,
)
from sequencer.recipe.repeat import Repeat, parse_repeat
from sequencer.recipe.resultsdb import SharedDatabase, parse_results_database
from sequencer.recipe.retest import RetestPolicy, parse_part_by_part
from sequencer.recipe.tempcolimits import TempCoLimits, parse_tempco_limits
from sequencer.recipe.temperatures import SetPoint, parse_temperatures
from sequencer.recipe.yamlsource import Source, load_yaml

__all__ = ["FIGURES", "FIGURE_KIND", "FigureLimit", "JudgeSettings", "Recipe", "Station"]


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
class SweepStep:
    name: str
    start_v: float
    stop_v: float
    points: int
    compliance_a: float
    settle_s: float
    on_compliance: str = "flag"  # "trip": this step must not clamp; a hit trips the guard

    def __post_init__(self) -> None:
        if self.points < 2:
            raise ValueError("a sweep needs at least 2 points")


@dataclass(frozen=True)
class SpotStep:
    name: str
    voltage_v: float
    compliance_a: float
    repeats: int
    settle_s: float
    on_compliance: str = "flag"

    def __post_init__(self) -> None:
        if self.repeats < 1:
            raise ValueError("a spot needs at least 1 repeat")


Step = SweepStep | SpotStep | FiguresStep  # figures: the production step (figuresstep.py)


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
    repeat: Repeat | None = None  # passes over the tray on a schedule; None: one pass
    part_by_part: RetestPolicy = field(default_factory=RetestPolicy)  # --part-by-part
    lists: bool = False  # run steps as instrument-side lists where safe (sequencer.run.segment)
    temperatures: tuple[SetPoint, ...] = ()  # set points to run the steps at (recipe.temperatures)
    tempco: TempCoLimits = field(default_factory=TempCoLimits)  # recipe.tempcolimits

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
    source = load_yaml(path)
    top = _Fields.at(source, "", source.data)
    name = top.text("station")
    specs = instrument_specs(source, top, path.parent)  # `instrument:` + `tray:`, or several
    first = specs[0]
    resource, dialect, timeout_s = first.resource, first.dialect, first.timeout_s
    line_hz = first.line_frequency_hz
    channels = tuple(c for spec in specs for c in spec.channels)
    lim = _Fields.at(source, "limits", top.raw("limits"))
    limits = Limits(**parse_station_limits(lim))
    lim.finish()
    fixture = _Fields.at(source, "fixture", top.raw("fixture", {}))
    interlocked = fixture.raw("interlocked", False)
    fixture.check(isinstance(interlocked, bool), "interlocked", "must be true or false")
    fixture.finish()
    sim = _simulator_options(source, top.raw("simulator", {}))
    accuracy = parse_accuracy(source, top.raw("accuracy", None))
    shared = parse_results_database(source, top.raw("results_database", None))
    chamber = parse_chamber(source, top.raw("chamber", None))
    top.finish()
    text = source.text
    return Station(
        name,
        str(path),
        resource,
        dialect,
        timeout_s,
        line_hz,
        channels,
        limits,
        interlocked,
        sim,
        text,
        accuracy,
        shared,
        specs,
        chamber,
    )


SIM_KEYS: dict[str, Callable[[Any], bool]] = {
    "seed": lambda v: isinstance(v, int) and v >= 0,
    "devices": lambda v: isinstance(v, int) and 1 <= v <= 100_000_000,
    "preset": lambda v: isinstance(v, str),
    "spread": lambda v: isinstance(v, int | float) and 0 <= v <= 10,
    "defect_rate": lambda v: isinstance(v, int | float) and 0 <= v <= 1,
    "clock": lambda v: v in ("real", "virtual"),
    "faults": lambda v: isinstance(v, list),
    "reading_gain": lambda v: isinstance(v, int | float) and -0.1 <= v <= 0.1,
    "range_offset": lambda v: isinstance(v, int | float) and abs(v) <= 0.01,
    "contact_spread": lambda v: isinstance(v, int | float) and 0 <= v <= 0.1,
    "noise_seed": lambda v: isinstance(v, int) and 0 <= v <= 999_999,
}
# The fault schedule's vocabulary (simulator/faults.py; a test keeps the two equal). Only the
# shape is checked here, with file:line; the simulator checks the values when it starts.
FAULT_KINDS = ("no-reply", "late-reply", "close", "garbage")
FAULT_KINDS += ("error", "lid-open", "device-open", "device-short")
FAULT_KEYS = ("kind", "on", "after", "channel", "delay", "code", "count", "chance")


def _simulator_options(source: Source, value: Any) -> tuple[tuple[str, object], ...]:
    fields = _Fields.at(source, "simulator", value)
    out = []
    for key, valid in SIM_KEYS.items():
        if key in fields.data:
            item = fields.raw(key)
            fields.check(valid(item) and not isinstance(item, bool), key, f"is invalid ({item!r})")
            if key == "faults":
                item = _faults(source, item)
            out.append((key, item))
    fields.finish()
    return tuple(out)


def _faults(source: Source, items: list[Any]) -> tuple[object, ...]:
    return tuple(_fault(source, f"simulator.faults[{n}]", item) for n, item in enumerate(items))


def _fault(source: Source, where: str, item: Any) -> object:
    """One scheduled simulator fault: text 'kind:key=value,...' or a mapping of FAULT_KEYS."""
    kinds = ", ".join(FAULT_KINDS)
    if isinstance(item, str):
        kind = item.partition(":")[0].strip().lower()
        if kind not in FAULT_KINDS:
            raise source.error(where, f"must start with a fault kind ({kinds}), got {item!r}")
        return item
    if isinstance(item, dict) and "True" in item:  # YAML 1.1 reads a bare `on:` key as true
        item = {("on" if key == "True" else key): value for key, value in item.items()}
    fields = _Fields.at(source, where, item)
    kind = fields.text("kind")
    fields.check(kind in FAULT_KINDS, "kind", f"must be one of {kinds} (got {kind!r})")
    for key in FAULT_KEYS[1:]:
        if key in fields.data:
            value = fields.raw(key)
            ok = isinstance(value, str | int | float) and not isinstance(value, bool)
            fields.check(ok, key, f"must be a number or text (got {_show(value)})")
    fields.used.update(FAULT_KEYS)
    fields.finish()
    return dict(item)


# --- recipe -------------------------------------------------------------------------------------


def load_recipe(path: Path, *, station_path: Path | None = None) -> Recipe:
    """Load and validate a recipe and the station it names (or `station_path` instead)."""
    source = load_yaml(path)
    top = _Fields.at(source, "", source.data)
    product = top.text("product")
    lot = top.text("lot")
    operator = top.text("operator", "")
    station_name = top.text("station")
    station_file = station_path or (path.parent / station_name)
    station = load_station(station_file)
    nplc = top.number("nplc", 1.0)
    top.check(0.01 <= nplc <= 10, "nplc", f"must be 0.01 to 10 power-line cycles (got {nplc})")
    steps = _steps(source, top.raw("steps"))
    judge = parse_judge(source, top.raw("judge", {}), station.accuracy)
    check_against_judge(source, steps, judge)
    safety = _safety_settings(source, top, station)
    repeat = parse_repeat(source, top.raw("repeat", None))
    parts = parse_part_by_part(source, top.raw("part_by_part", None))
    lists = top.raw("lists", False)
    top.check(isinstance(lists, bool), "lists", f"must be true or false (got {lists!r})")
    temperatures = parse_temperatures(source, top.raw("temperatures", None))
    tempco = parse_tempco_limits(source, top.raw("tempco", None))
    top.finish()
    text = source.text
    return Recipe(
        str(path),
        product,
        lot,
        station,
        nplc,
        steps,
        judge,
        operator,
        text,
        repeat=repeat,
        part_by_part=parts,
        lists=lists,
        temperatures=temperatures,
        tempco=tempco,
        **safety,
    )


def _safety_settings(source: Source, top: _Fields, station: Station) -> dict[str, Any]:
    """The recipe's optional safety keys: limits, ratings, on_trip, hazardous_voltage."""
    return {
        "limits": parse_recipe_limits(source, top.raw("limits", None), station.limits),
        "ratings": parse_ratings(source, top.raw("ratings", None)),
        "on_trip": parse_choice(source, "on_trip", top.raw("on_trip", "stop"), ON_TRIP),
        "hazardous_voltage_acknowledged": parse_acknowledgement(
            source, top.raw("hazardous_voltage", None)
        ),
    }


def _steps(source: Source, value: Any) -> tuple[Step, ...]:
    if not isinstance(value, list) or not value:
        raise source.error("steps", "must be a list of one or more steps (sweep, spot, figures)")
    steps: list[Step] = []
    for index, item in enumerate(value):
        where = f"steps[{index}]"
        if not isinstance(item, dict) or len(item) != 1:
            raise source.error(where, "must be one 'sweep:', 'spot:' or 'figures:' mapping")
        ((kind, body),) = item.items()
        path = f"{where}.{kind}"
        if kind == "sweep":
            steps.append(_sweep(_Fields.at(source, path, body), index))
        elif kind == "spot":
            steps.append(_spot(_Fields.at(source, path, body), index))
        elif kind == "figures":
            steps.append(parse_figures(_Fields.at(source, path, body), index))
        else:
            raise source.error(path, "is not a step kind (expected 'sweep', 'spot' or 'figures')")
    names = [s.name for s in steps]
    for index, name in enumerate(names):
        if names.index(name) != index:
            raise source.error(f"steps[{index}]", f"repeats the step name '{name}'")
    return tuple(steps)


def _sweep(f: _Fields, index: int) -> SweepStep:
    name = f.text("name", f"sweep{index + 1}")
    start = f.quantity("start", "voltage")
    stop = f.quantity("stop", "voltage")
    f.check(stop != start, "stop", f"must differ from start (both {start} V)")
    has_points, has_step = "points" in f.data, "step" in f.data
    f.check(has_points != has_step, "points", "or 'step' must be given, not both and not neither")
    if has_points:
        points = int(f.number("points", integer=True))
        f.check(2 <= points <= 100_000, "points", f"must be 2 to 100000 (got {points})")
    else:
        step = f.quantity("step", "voltage")
        f.check(step > 0, "step", f"must be positive (got {step} V)")
        span = abs(stop - start)
        points = round(span / step) + 1
        many = f"gives {points} points; at most 100000 (got {step:g} V)"
        f.check(points <= 100_000, "step", many)
        f.check(
            abs((points - 1) * step - span) < 1e-9 * max(span, 1),
            "step",
            f"must divide the span {span:g} V evenly (got {step:g} V)",
        )
    compliance = _positive(f, "compliance", "current")
    settle = f.quantity("settle", "time", "0 s")
    f.check(0 <= settle <= 10, "settle", f"must be 0 to 10 s (got {settle} s)")
    clamp = _on_compliance(f)
    f.finish()
    return SweepStep(name, start, stop, points, compliance, settle, clamp)


def _spot(f: _Fields, index: int) -> SpotStep:
    name = f.text("name", f"spot{index + 1}")
    voltage = f.quantity("voltage", "voltage")
    compliance = _positive(f, "compliance", "current")
    repeats = int(f.number("repeats", 1, integer=True))
    f.check(1 <= repeats <= 10_000, "repeats", f"must be 1 to 10000 (got {repeats})")
    settle = f.quantity("settle", "time", "0 s")
    f.check(0 <= settle <= 10, "settle", f"must be 0 to 10 s (got {settle} s)")
    clamp = _on_compliance(f)
    f.finish()
    return SpotStep(name, voltage, compliance, repeats, settle, clamp)


def _on_compliance(f: _Fields) -> str:
    """`flag` (default): a clamped point is kept, marked, and left out of the figures;
    `trip`: the step must not clamp, so a hit trips the guard like an over-power reading."""
    value = f.raw("on_compliance", "flag")
    return parse_choice(f.source, f.where("on_compliance"), value, ON_COMPLIANCE)
