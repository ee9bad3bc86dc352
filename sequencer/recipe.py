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

from .repeat import Repeat, parse_repeat
from .units import UnitProblem, parse_quantity
from .yamlsource import Source, load_yaml

FIGURES = ("regulated_current", "limiting_voltage", "dynamic_impedance", "knee_impedance")
FIGURE_KIND = {
    "regulated_current": "current",
    "limiting_voltage": "voltage",
    "dynamic_impedance": "resistance",
    "knee_impedance": "resistance",
}


@dataclass(frozen=True)
class Limits:
    """Absolute limits of a station: what the fixture, wiring and SMU may ever carry."""

    max_voltage_v: float
    max_current_a: float
    max_power_w: float
    touch_safe_v: float = 42.0  # common practice, no source (IEC 61010-1 thresholds are higher)

    def __post_init__(self) -> None:
        for name in ("max_voltage_v", "max_current_a", "max_power_w", "touch_safe_v"):
            if not getattr(self, name) > 0:
                raise ValueError(f"{name} must be positive")


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

    @property
    def simulator_options(self) -> dict[str, object]:
        return dict(self.simulator)


@dataclass(frozen=True)
class SweepStep:
    name: str
    start_v: float
    stop_v: float
    points: int
    compliance_a: float
    settle_s: float

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

    def __post_init__(self) -> None:
        if self.repeats < 1:
            raise ValueError("a spot needs at least 1 repeat")


Step = SweepStep | SpotStep


@dataclass(frozen=True)
class FigureLimit:
    figure: str
    min: float | None = None
    max: float | None = None


@dataclass(frozen=True)
class JudgeSettings:
    """What the judge computes and against which limits. Defaults are the trade's usual ones:
    test voltage 25 V, knee voltage 6 V, limiting voltage at 0.8 x the measured regulated
    current (REFERENCES.md s1, [src: MIL-PRF-19500/463 as reproduced in data sheets])."""

    test_voltage_v: float = 25.0
    knee_voltage_v: float = 6.0
    knee_fraction: float = 0.8
    knee_current_a: float | None = None  # fixed knee reference current, overrides the fraction
    slope_window_v: float = 2.0
    limits: tuple[FigureLimit, ...] = ()

    def limit(self, figure: str) -> FigureLimit:
        for item in self.limits:
            if item.figure == figure:
                return item
        return FigureLimit(figure)


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
    repeat: Repeat | None = None  # passes over the tray on a schedule; None: one pass

    @property
    def digest(self) -> str:
        """SHA-256 of the recipe and station text: what a stored result was produced under."""
        return hashlib.sha256((self.text + "\0" + self.station.text).encode()).hexdigest()


# --- reading fields ---------------------------------------------------------------------------


@dataclass
class _Fields:
    """A mapping at `path` in `source`; hands out checked fields and refuses unknown ones."""

    source: Source
    path: str
    data: dict[str, Any]
    used: set[str] = field(default_factory=set)

    @classmethod
    def at(cls, source: Source, path: str, value: Any) -> _Fields:
        if not isinstance(value, dict):
            raise source.error(path, f"must be a mapping of settings (got {_show(value)})")
        return cls(source, path, value)

    def _where(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def raw(self, key: str, default: Any = ..., *, required: bool = True) -> Any:
        self.used.add(key)
        if key in self.data:
            return self.data[key]
        if default is not ...:
            return default
        raise self.source.error(self.path or key, f"needs '{key}'" if self.path else "is missing")

    def quantity(self, key: str, kind: str, default: Any = ...) -> float:
        value = self.raw(key, default)
        if isinstance(value, float) and value is default:
            return value
        try:
            return parse_quantity(value, kind)
        except UnitProblem as exc:
            raise self.source.error(self._where(key), str(exc)) from None

    def number(self, key: str, default: Any = ..., *, integer: bool = False) -> float:
        value = self.raw(key, default)
        ok = isinstance(value, int) if integer else isinstance(value, int | float)
        if isinstance(value, bool) or not ok:
            kind = "a whole number" if integer else "a plain number"
            raise self.source.error(self._where(key), f"must be {kind} (got {_show(value)})")
        return value

    def text(self, key: str, default: Any = ...) -> str:
        value = self.raw(key, default)
        if not isinstance(value, str | int | float) or isinstance(value, bool):
            raise self.source.error(self._where(key), f"must be text (got {_show(value)})")
        return str(value)

    def check(self, condition: bool, key: str, problem: str) -> None:
        if not condition:
            raise self.source.error(self._where(key), problem)

    def finish(self) -> None:
        for key in self.data:
            if key not in self.used:
                known = ", ".join(sorted(self.used))
                raise self.source.error(
                    self._where(key), f"is not a known setting here (known: {known})"
                )


def _show(value: Any) -> str:
    return repr(value) if not isinstance(value, dict | list) else type(value).__name__


# --- station ------------------------------------------------------------------------------------


def load_station(path: Path) -> Station:
    source = load_yaml(path)
    top = _Fields.at(source, "", source.data)
    name = top.text("station")
    inst = _Fields.at(source, "instrument", top.raw("instrument"))
    resource = inst.text("resource")
    dialect = inst.text("dialect", "scpi1999")
    if dialect != "scpi1999" and not Path(dialect).is_absolute():
        dialect = str((path.parent / dialect).resolve())
    timeout_s = inst.quantity("timeout", "time", "2 s")
    inst.check(0.05 <= timeout_s <= 60, "timeout", f"must be 50 ms to 60 s (got {timeout_s} s)")
    line_hz = inst.quantity("line_frequency", "frequency", "50 Hz")
    inst.check(line_hz in (50.0, 60.0), "line_frequency", f"must be 50 Hz or 60 Hz (got {line_hz})")
    inst.finish()
    channels = _channels(source, top.raw("tray"))
    top.used.add("tray")
    lim = _Fields.at(source, "limits", top.raw("limits"))
    limits = Limits(
        max_voltage_v=_positive(lim, "max_voltage", "voltage"),
        max_current_a=_positive(lim, "max_current", "current"),
        max_power_w=_positive(lim, "max_power", "power"),
        touch_safe_v=_positive(lim, "touch_safe_voltage", "voltage", "42 V"),
    )
    lim.finish()
    fixture = _Fields.at(source, "fixture", top.raw("fixture", {}))
    interlocked = fixture.raw("interlocked", False)
    fixture.check(isinstance(interlocked, bool), "interlocked", "must be true or false")
    fixture.finish()
    sim = _simulator_options(source, top.raw("simulator", {}))
    top.finish()
    text = path.read_text(encoding="utf-8")
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
    )


def _positive(fields: _Fields, key: str, kind: str, default: Any = ...) -> float:
    value = fields.quantity(key, kind, default)
    fields.check(value > 0, key, f"must be positive (got {value})")
    return value


def _channels(source: Source, value: Any) -> tuple[int, ...]:
    tray = _Fields.at(source, "tray", value)
    raw = tray.raw("channels")
    tray.finish()
    where = "tray.channels"
    if isinstance(raw, int) and not isinstance(raw, bool) and raw > 0:
        return tuple(range(1, raw + 1))
    if isinstance(raw, list) and raw and all(isinstance(c, int) and c > 0 for c in raw):
        if len(set(raw)) != len(raw):
            raise source.error(where, "lists a channel twice")
        return tuple(raw)
    if isinstance(raw, str) and "-" in raw:
        first, _, last = raw.partition("-")
        if first.strip().isdigit() and last.strip().isdigit() and 0 < int(first) <= int(last):
            return tuple(range(int(first), int(last) + 1))
    raise source.error(
        where, f"must be a count, a list of channels or a range '1-20' (got {raw!r})"
    )


SIM_KEYS: dict[str, Callable[[Any], bool]] = {
    "seed": lambda v: isinstance(v, int) and v >= 0,
    "preset": lambda v: isinstance(v, str),
    "spread": lambda v: isinstance(v, int | float) and 0 <= v <= 10,
    "defect_rate": lambda v: isinstance(v, int | float) and 0 <= v <= 1,
    "clock": lambda v: v in ("real", "virtual"),
}


def _simulator_options(source: Source, value: Any) -> tuple[tuple[str, object], ...]:
    fields = _Fields.at(source, "simulator", value)
    out = []
    for key, valid in SIM_KEYS.items():
        if key in fields.data:
            item = fields.raw(key)
            fields.check(valid(item) and not isinstance(item, bool), key, f"is invalid ({item!r})")
            out.append((key, item))
    fields.finish()
    return tuple(out)


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
    judge = _judge(source, top.raw("judge", {}))
    repeat = parse_repeat(source, top.raw("repeat", None))
    top.finish()
    text = path.read_text(encoding="utf-8")
    return Recipe(str(path), product, lot, station, nplc, steps, judge, operator, text, repeat)


def _steps(source: Source, value: Any) -> tuple[Step, ...]:
    if not isinstance(value, list) or not value:
        raise source.error("steps", "must be a list of one or more steps (sweep or spot)")
    steps: list[Step] = []
    for index, item in enumerate(value):
        where = f"steps[{index}]"
        if not isinstance(item, dict) or len(item) != 1:
            raise source.error(where, "must be one 'sweep:' or 'spot:' mapping")
        ((kind, body),) = item.items()
        path = f"{where}.{kind}"
        if kind == "sweep":
            steps.append(_sweep(_Fields.at(source, path, body), index))
        elif kind == "spot":
            steps.append(_spot(_Fields.at(source, path, body), index))
        else:
            raise source.error(path, "is not a step kind (expected 'sweep' or 'spot')")
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
        f.check(
            abs((points - 1) * step - span) < 1e-9 * max(span, 1),
            "step",
            f"must divide the span {span:g} V evenly (got {step:g} V)",
        )
    compliance = _positive(f, "compliance", "current")
    settle = f.quantity("settle", "time", "0 s")
    f.check(0 <= settle <= 10, "settle", f"must be 0 to 10 s (got {settle} s)")
    f.finish()
    return SweepStep(name, start, stop, points, compliance, settle)


def _spot(f: _Fields, index: int) -> SpotStep:
    name = f.text("name", f"spot{index + 1}")
    voltage = f.quantity("voltage", "voltage")
    compliance = _positive(f, "compliance", "current")
    repeats = int(f.number("repeats", 1, integer=True))
    f.check(1 <= repeats <= 10_000, "repeats", f"must be 1 to 10000 (got {repeats})")
    settle = f.quantity("settle", "time", "0 s")
    f.check(0 <= settle <= 10, "settle", f"must be 0 to 10 s (got {settle} s)")
    f.finish()
    return SpotStep(name, voltage, compliance, repeats, settle)


def _judge(source: Source, value: Any) -> JudgeSettings:
    f = _Fields.at(source, "judge", value)
    defaults = JudgeSettings()
    vt = f.quantity("test_voltage", "voltage", "25 V")
    vk = f.quantity("knee_voltage", "voltage", "6 V")
    fraction = float(f.number("knee_fraction", defaults.knee_fraction))
    f.check(0 < fraction < 1, "knee_fraction", f"must lie between 0 and 1 (got {fraction})")
    knee_current = f.quantity("knee_current", "current", None) if "knee_current" in f.data else None
    f.used.add("knee_current")
    window = f.quantity("slope_window", "voltage", "2 V")
    f.check(window > 0, "slope_window", f"must be positive (got {window} V)")
    limits = _figure_limits(source, f.raw("limits", {}))
    f.finish()
    return JudgeSettings(vt, vk, fraction, knee_current, window, limits)


def _figure_limits(source: Source, value: Any) -> tuple[FigureLimit, ...]:
    f = _Fields.at(source, "judge.limits", value)
    out = []
    for figure in FIGURES:
        if figure not in f.data:
            continue
        g = _Fields.at(source, f"judge.limits.{figure}", f.raw(figure))
        kind = FIGURE_KIND[figure]
        low = g.quantity("min", kind) if "min" in g.data else None
        high = g.quantity("max", kind) if "max" in g.data else None
        g.used.update({"min", "max"})
        g.check(low is not None or high is not None, "min", "or 'max' must be given")
        g.check(low is None or high is None or low < high, "max", f"must exceed min ({low})")
        g.finish()
        out.append(FigureLimit(figure, low, high))
    f.finish()
    return tuple(out)
