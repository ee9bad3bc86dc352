"""The station file's format: what a bench is (its SMUs, tray, limits, accuracy, chamber).

Every key with its type, unit, default and meaning; the rules of one value or one section are
here too. The loader (sequencer.recipe.load) turns the model into recipe.load.Station and checks
what spans instruments (shared channels, one line frequency).
"""

from __future__ import annotations

from typing import Annotated, Any, Union

from pydantic import (
    AfterValidator,
    BeforeValidator,
    Discriminator,
    PlainValidator,
    Strict,
    Tag,
    WithJsonSchema,
    model_validator,
)

from sequencer.model.units import format_si
from sequencer.recipe.fields import show
from sequencer.recipe.format.types import (
    Current,
    Flag,
    Fraction,
    Frequency,
    Number,
    Power,
    Rate,
    Section,
    Temperature,
    Text,
    Time,
    Voltage,
    Whole,
    bounds,
    choice,
    problem,
    rule,
    setting,
)
from sequencer.recipe.limits import HAZARDOUS_DC_V, STATION_CEILINGS, TOUCH_SAFE_DEFAULT_V
from sequencer.recipe.linkspec import BAUDS, FLOW_CONTROLS, PARITIES, STOP_BITS
from sequencer.recipe.linkspec import TERMINATORS as LINK_TERMINATORS
from sequencer.recipe.resultsdb import WAIT_AT_END_S, url_problem

SIM_RESOURCE = "sim"
DEFAULT_DIALECT = "scpi1999"
MAX_INSTRUMENTS = 32
# A tray or switch matrix of a bench has tens to a few thousand positions; a lot measured one
# position after another (a handler, or a dry run of a whole lot on the simulator) has up to
# some hundred thousand. More is a slip of the keyboard.
MAX_CHANNELS = 1_000_000
CEILING = {key: (ceiling, unit) for key, _, _, unit, ceiling in STATION_CEILINGS}


# --- instruments --------------------------------------------------------------------------------


def _whole(text: str) -> bool:
    """ASCII digits only: str.isdigit() also takes '¹' and '٣', which int() refuses or reads."""
    return text.strip().isascii() and text.strip().isdigit()


def _channels(raw: Any) -> tuple[int, ...]:
    """A count (20), a list of channels ([1, 3, 5]) or a range ('1-20')."""
    found: tuple[int, ...] | range | None = None
    if isinstance(raw, int) and not isinstance(raw, bool) and raw > 0:
        found = range(1, raw + 1)
    elif isinstance(raw, list) and raw and all(_channel(c) for c in raw):
        found = tuple(raw)
    elif isinstance(raw, str) and "-" in raw:
        first, _, last = raw.partition("-")
        if _whole(first) and _whole(last) and 0 < int(first) <= int(last):
            found = range(int(first), int(last) + 1)
    if found is None:
        raise problem(f"must be a count, a list of channels or a range '1-20' (got {raw!r})")
    if len(found) > MAX_CHANNELS:
        raise problem(f"names {len(found)} channels; at most {MAX_CHANNELS}")
    if len(set(found)) != len(found):
        raise problem("lists a channel twice")
    return tuple(found)


def _channel(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value > 0


Channels = Annotated[
    tuple[int, ...],
    BeforeValidator(_channels),
    WithJsonSchema(
        {
            "anyOf": [
                {"type": "integer", "minimum": 1},
                {"type": "array", "items": {"type": "integer", "minimum": 1}, "minItems": 1},
                {"type": "string", "pattern": r"^\s*[0-9]+\s*-\s*[0-9]+\s*$"},
            ],
            "x-unit": "a count (20), a list of channels ([1, 3]) or a range ('1-20')",
        },
        mode="validation",
    ),
]


def _resource(value: Any) -> str:
    """`sim`, or text that can name an instrument (checked before anything is opened)."""
    if value == SIM_RESOURCE:
        return value
    # Start-up speed: instruments.transport loads pyvisa; only a station with a resource needs it.
    from instruments.transport import RESOURCE_HINT, resource_problem

    found = resource_problem(value) if isinstance(value, str) else "is not text"
    if found:
        hint = f"{RESOURCE_HINT}, or {SIM_RESOURCE} for the simulator"
        raise problem(f"{found}: {hint} (got {show(value)})")
    return value


Resource = Annotated[
    str,
    BeforeValidator(_resource),
    WithJsonSchema({"type": "string", "minLength": 1}, mode="validation"),
]
Timeout = Annotated[Time, rule(lambda v: 0.05 <= v <= 60, "must be 50 ms to 60 s (got {v} s)")]
LineFrequency = Annotated[
    Frequency, rule(lambda v: v in (50.0, 60.0), "must be 50 Hz or 60 Hz (got {v})")
]
CallTime = Annotated[Time, rule(lambda v: 0 < v <= 1, "must be above 0 and at most 1 s ({v})")]


def _one_of(options: tuple, words: str) -> Any:
    ok = lambda v: v in options and not isinstance(v, bool)  # noqa: E731
    return rule(ok, f"must be {words} (got {{v!r}})")


class SerialLine(Section):
    """`serial:` — the line settings of a serial (ASRL) resource."""

    baud: Annotated[Whole, _one_of(BAUDS, f"one of {BAUDS}")] = setting("the line's speed", 9600)
    data_bits: Annotated[Whole, _one_of((5, 6, 7, 8), "5 to 8")] = setting("bits a character", 8)
    parity: choice(PARITIES) = setting("the parity bit", "none")  # type: ignore[valid-type]
    stop_bits: Annotated[Number, _one_of(STOP_BITS, "1, 1.5 or 2")] = setting("stop bits", 1)
    flow_control: choice(FLOW_CONTROLS) = setting(  # type: ignore[valid-type]
        "hardware or software handshake, or none", "none"
    )
    echo: Flag = setting(
        "the instrument sends every command back before its reply (read and checked, never "
        "taken for a reply)",
        False,
    )


class Instrument(Section):
    """`instrument:` — the one SMU of a station (its channels are in `tray:`)."""

    resource: Resource = setting(
        "the VISA resource of the SMU, e.g. TCPIP0::192.0.2.17::5025::SOCKET, or sim for the "
        "embedded simulator"
    )
    dialect: Text = setting(
        "the SMU's command text: a packaged dialect name or a dialect file's path (relative to "
        "the station file)",
        DEFAULT_DIALECT,
    )
    timeout: Timeout = setting("how long one reply may take", "2 s")
    line_frequency: LineFrequency = setting(
        "the mains frequency, which sets the reading aperture (nplc)", "50 Hz"
    )
    write_time: CallTime | None = setting(
        "what one SCPI write costs on this instrument, for the time estimate (measured default)",
        None,
    )
    query_time: CallTime | None = setting(
        "what one SCPI query round trip costs, for the time estimate (measured default)", None
    )
    visa_library: Text = setting(
        "the VISA library: @py (the pure-Python backend) or a VISA library's path", "@py"
    )
    read_termination: choice(LINK_TERMINATORS) | None = setting(  # type: ignore[valid-type]
        "how the instrument ends a reply: LF, CR or CRLF (default: the dialect's)", None
    )
    write_termination: choice(LINK_TERMINATORS) | None = setting(  # type: ignore[valid-type]
        "how a command is ended: LF, CR or CRLF (default: the dialect's)", None
    )
    serial: SerialLine | None = setting("line settings, for a serial (ASRL) resource only", None)

    @model_validator(mode="after")
    def _serial_only_on_serial(self) -> Instrument:
        if self.serial is not None and not str(self.resource).upper().startswith("ASRL"):
            raise problem(f"is for serial (ASRL) resources, not {self.resource}", at="serial")
        return self


class Tray(Section):
    """`tray:` — the channels wired to the one SMU."""

    channels: Channels = setting("the tray positions under test")


class NamedInstrument(Instrument):
    """One entry of `instruments:` — an SMU with its own channels, tested in parallel."""

    name: Text | None = setting("what the screen and records call it (default smu1, smu2, ...)",
                                None)  # fmt: skip
    channels: Channels = setting("the tray positions wired to this instrument")


# --- limits -------------------------------------------------------------------------------------


def _ceiling(key: str) -> Any:
    most, unit = CEILING[key]

    def check(value: float) -> float:
        if not value > 0:
            raise problem(f"must be positive (got {value})")
        if value > most:
            raise problem(f"must be at most {format_si(most, unit)}, the most ccbench drives "
                          f"(got {format_si(value, unit)})")  # fmt: skip
        return value

    return AfterValidator(check)


PositiveVoltage = Annotated[Voltage, rule(lambda v: v > 0, "must be positive (got {raw})")]


class StationLimits(Section):
    """`limits:` — what the fixture, wiring and SMU may ever carry; a recipe may only lower them."""

    max_voltage: Annotated[Voltage, _ceiling("max_voltage")] = setting(
        "the highest voltage the fixture and wiring are rated for (at most 1 kV)"
    )
    max_current: Annotated[Current, _ceiling("max_current")] = setting(
        "the highest current the station may source (at most 10 A)"
    )
    max_power: Annotated[Power, _ceiling("max_power")] = setting(
        "the most power the station may deliver, |V| x compliance (at most 1 kW)"
    )
    touch_safe_voltage: PositiveVoltage | None = setting(
        "above this a level is hazardous: interlocked fixture, closed lid and an "
        "acknowledgement (default 42 V, or max_voltage if lower)",
        None,
    )
    touch_safe_reason: Text = setting(
        "why this station is safe to touch above 70 V d.c. (needed for a touch_safe_voltage "
        "above it)",
        "",
    )

    @model_validator(mode="after")
    def _touch_safe(self) -> StationLimits:
        most, touch = self.max_voltage, self.touch_safe_v
        if touch > most:
            raise problem(f"must not exceed max_voltage ({format_si(most, 'V')}; got "
                          f"{format_si(touch, 'V')})", at="touch_safe_voltage")  # fmt: skip
        if touch > HAZARDOUS_DC_V and not self.touch_safe_reason.strip():
            raise problem(
                f"must be at most {HAZARDOUS_DC_V:g} V, the d.c. level above which IEC 61010-1 "
                f"calls accessible parts hazardous live (got {format_si(touch, 'V')}); if this "
                "station is safe to touch above it, say why in 'touch_safe_reason:' beside it",
                at="touch_safe_voltage",
            )
        return self

    @property
    def touch_safe_v(self) -> float:
        """Unwritten: the usual 42 V, or the station's maximum if that is lower."""
        if self.touch_safe_voltage is None:
            return min(TOUCH_SAFE_DEFAULT_V, self.max_voltage)
        return self.touch_safe_voltage


class Fixture(Section):
    """`fixture:` — the device holder."""

    interlocked: Flag = setting(
        "true when the fixture has a lid interlock (needed above the touch-safe voltage)", False
    )


# --- simulator ----------------------------------------------------------------------------------

# The fault schedule's vocabulary (simulator/faults.py; a test keeps the two equal). Only the
# shape is checked here, with file:line; the simulator checks the values when it starts.
FAULT_KINDS = ("no-reply", "late-reply", "close", "garbage")
FAULT_KINDS += ("error", "lid-open", "device-open", "device-short")
FAULT_KEYS = ("kind", "on", "after", "channel", "delay", "code", "count", "chance")
# A fault's setting as written (3 stays 3: the simulator reads it), a number or text.
Scalar = Annotated[
    str | float,
    PlainValidator(lambda v: _scalar(v)),
    WithJsonSchema({"type": ["string", "number"]}),
]


def _scalar(value: Any) -> Any:
    if not isinstance(value, str | int | float) or isinstance(value, bool):
        raise problem(f"must be a number or text (got {show(value)})")
    return value


class FaultMapping(Section):
    """One scheduled simulator fault written as a mapping."""

    kind: choice(FAULT_KINDS) = setting("what goes wrong")  # type: ignore[valid-type]
    on: Scalar | None = setting("the SCPI command (or event) it strikes at", None)
    after: Scalar | None = setting("how many of them pass first", None)
    channel: Scalar | None = setting("the tray channel it strikes on", None)
    delay: Scalar | None = setting("how late a late reply comes", None)
    code: Scalar | None = setting("the SCPI error code an error fault queues", None)
    count: Scalar | None = setting("how many times it strikes", None)
    chance: Scalar | None = setting("the chance it strikes at each occasion", None)

    @model_validator(mode="before")
    @classmethod
    def _bare_on(cls, data: Any) -> Any:
        """YAML 1.1 reads a bare `on:` key as true."""
        if isinstance(data, dict) and "True" in data:
            return {("on" if key == "True" else key): value for key, value in data.items()}
        return data


def _fault_text(value: Any) -> Any:
    if isinstance(value, str):
        kind = value.partition(":")[0].strip().lower()
        if kind not in FAULT_KINDS:
            kinds = ", ".join(FAULT_KINDS)
            raise problem(f"must start with a fault kind ({kinds}), got {value!r}")
    return value


FaultText = Annotated[str, BeforeValidator(_fault_text)]
Fault = Annotated[
    Union[Annotated[FaultText, Tag("~text")], Annotated[FaultMapping, Tag("~mapping")]],  # noqa: UP007
    Discriminator(lambda v: "~text" if isinstance(v, str) else "~mapping"),
]


def _invalid(test: Any) -> Any:
    return rule(test, "is invalid ({raw!r})")


class Simulator(Section):
    """`simulator:` — read only with `resource: sim`: which made-up lot the simulated tray holds."""

    seed: Annotated[Whole, _invalid(lambda v: v >= 0)] | None = setting(
        "the seed of the simulated lot (the same seed, the same devices)", None
    )
    devices: Annotated[Whole, _invalid(lambda v: 1 <= v <= 10**8), bounds(1, 10**8)] | None = (
        setting("how many devices the simulated lot holds (default: the tray's top channel)", None)
    )
    preset: Text | None = setting("the simulated device type (e.g. FLC-1.8)", None)
    spread: Annotated[Number, _invalid(lambda v: 0 <= v <= 10), bounds(0, 10)] | None = setting(
        "how widely the simulated devices scatter (0 to 10; 1 is the preset's own)", None
    )
    defect_rate: Annotated[Number, _invalid(lambda v: 0 <= v <= 1), bounds(0, 1)] | None = setting(
        "the fraction of defective devices in the lot (0 to 1)", None
    )
    clock: choice(("real", "virtual")) | None = setting(  # type: ignore[valid-type]
        "real: the simulator takes the time a bench would; virtual: it only counts it", None
    )
    faults: list[Fault] | None = setting(
        "scheduled faults, each 'kind:key=value,...' or a mapping", None
    )
    reading_gain: Annotated[Number, _invalid(lambda v: -0.1 <= v <= 0.1), bounds(-0.1, 0.1)] | (
        None
    ) = setting("a gain error of the simulated readings (-0.1 to 0.1)", None)
    range_offset: Annotated[Number, _invalid(lambda v: abs(v) <= 0.01), bounds(-0.01, 0.01)] | (
        None
    ) = setting("an offset between current ranges, as a fraction (at most 0.01)", None)
    contact_spread: Annotated[Number, _invalid(lambda v: 0 <= v <= 0.1), bounds(0, 0.1)] | (
        None
    ) = setting("how much the contact resistance scatters (0 to 0.1)", None)
    noise_seed: Annotated[Whole, _invalid(lambda v: 0 <= v <= 999_999)] | None = setting(
        "the seed of the reading noise (0 to 999999)", None
    )


# --- accuracy -----------------------------------------------------------------------------------

NonNegative = rule(lambda v: v >= 0, "must not be negative (got {raw})")
Positive = rule(lambda v: v > 0, "must be positive (got {raw})")


class CurrentRange(Section):
    """One current range of the SMU and what it measures to: ± (gain x reading + offset)."""

    range: Annotated[Current, Positive] = setting("the range's full scale")
    gain: Fraction = setting("the error proportional to the reading")
    offset: Annotated[Current, NonNegative] = setting("the error independent of the reading")


class VoltageRange(Section):
    """One voltage range of the SMU and what it measures to: ± (gain x reading + offset)."""

    range: Annotated[Voltage, Positive] = setting("the range's full scale")
    gain: Fraction = setting("the error proportional to the reading")
    offset: Annotated[Voltage, NonNegative] = setting("the error independent of the reading")


def _ranges(value: Any) -> Any:
    if not isinstance(value, list) or not value:
        raise problem("must be a list of ranges, e.g. [{range: 10 mA, gain: 0.05 %, ...")
    return value


def _rising(rows: list[Any]) -> list[Any]:
    for index in range(1, len(rows)):
        if not rows[index].range > rows[index - 1].range:
            raise problem("must be larger than the range before it", at=f"{index}.range")
    return rows


class Accuracy(Section):
    """`accuracy:` — what the SMU measures to, per range, as its data sheet states."""

    current: (
        Annotated[list[CurrentRange], BeforeValidator(_ranges), AfterValidator(_rising)] | None
    ) = setting("the current ranges, smallest first (default: the built-in table)", None)
    voltage: (
        Annotated[list[VoltageRange], BeforeValidator(_ranges), AfterValidator(_rising)] | None
    ) = setting("the voltage ranges, smallest first (default: the built-in table)", None)


# --- results database ---------------------------------------------------------------------------


def _url(value: Any) -> Any:
    found = url_problem(value) if isinstance(value, str) else ""
    if found:
        raise problem(found)
    return value


Url = Annotated[Text, rule(lambda v: not url_problem(v), "{raw}"), BeforeValidator(_url)]


class ResultsDatabase(Section):
    """`results_database:` as a mapping: a shared PostgreSQL store besides the run folder."""

    url: Url = setting("postgresql://user@host[:port]/database, without a password")
    wait_at_end: Annotated[
        Time, rule(lambda v: 0 <= v <= 600, "must be 0 to 600 s (got {v} s)")
    ] = setting("how long the end of a run waits for the last results to reach it", "15 s")


SharedStore = Annotated[
    Union[Annotated[Url, Tag("~url")], Annotated[ResultsDatabase, Tag("~mapping")]],  # noqa: UP007
    Discriminator(lambda v: "~url" if isinstance(v, str) else "~mapping"),
]
assert WAIT_AT_END_S == 15.0  # the default written above


# --- chamber ------------------------------------------------------------------------------------

CHAMBER_SIM_KEYS = ("room", "tau_air", "tau_mount", "reach", "speed", "lowest", "highest")


class ChamberSimulator(Section):
    """`chamber.simulator:` — options of the simulated chamber (resource: sim only)."""

    room: Number | None = setting("room temperature in degC", None)
    tau_air: Number | None = setting("the air's time constant in s", None)
    tau_mount: Number | None = setting("the device mount's time constant in s", None)
    reach: Number | None = setting("how close to the set point the air gets, as a fraction", None)
    speed: Number | None = setting("how many times faster than real time it runs", None)
    lowest: Number | None = setting("the coldest it can reach, in degC", None)
    highest: Number | None = setting("the hottest it can reach, in degC", None)
    faults: list[Annotated[str, Strict()]] | None = setting("names of faults to simulate", None)


Safe = Annotated[
    Union[Annotated[Temperature, Tag("~temperature")], Annotated[str, Tag("~off")]],  # noqa: UP007
    Discriminator(lambda v: "~off" if v == "off" else "~temperature"),
]


class Chamber(Section):
    """`chamber:` — the station's temperature source (a chamber, hot plate or air stream)."""

    resource: Text = setting("the chamber's VISA resource, or sim for the simulated chamber")
    dialect: Text = setting("the chamber's command text (a packaged name or a file's path)",
                            "chamber_text")  # fmt: skip
    timeout: Annotated[Time, Positive] = setting("how long one reply may take", "2 s")
    lowest: Temperature = setting("no set point below this (the fixture's and cables' range)")
    highest: Temperature = setting("no set point above this")
    rate: Annotated[Rate, rule(lambda v: v > 0, "must be positive, e.g. '5 K/min'")] = setting(
        "the fastest the set point may move (thermal shock)"
    )
    safe: Safe = setting("where every ending leaves it, within lowest..highest, or 'off'")
    simulator: ChamberSimulator | None = setting("options of the simulated chamber", None)

    @model_validator(mode="after")
    def _within(self) -> Chamber:
        low, high = self.lowest, self.highest
        if not low < high:
            raise problem(f"must be above lowest ({low:g} degC)", at="highest")
        if self.safe != "off" and not low <= float(self.safe) <= high:
            where = f"must lie within lowest..highest ({low:g}..{high:g} degC), or be 'off'"
            raise problem(where, at="safe")
        if self.simulator is not None and self.resource != SIM_RESOURCE:
            raise problem("goes with 'resource: sim' only", at="simulator")
        return self


# --- the station file ---------------------------------------------------------------------------


class StationFile(Section):
    """A station file: one bench, its SMUs and tray, its limits, accuracy and chamber."""

    station: Text = setting("the bench's name, as records and screens show it")
    instrument: Instrument | None = setting("the one SMU (with `tray:`); or use `instruments:`",
                                            None)  # fmt: skip
    tray: Tray | None = setting("the channels of the one SMU", None)
    instruments: (
        Annotated[
            list[NamedInstrument],
            BeforeValidator(lambda v: _several(v)),
            bounds(minItems=1, maxItems=MAX_INSTRUMENTS),
        ]
        | None
    ) = setting("several SMUs, each with its channels, tested in parallel", None)
    limits: StationLimits = setting("the station's absolute limits")
    fixture: Fixture = setting("the device holder", {})
    simulator: Simulator = setting("the simulated lot (resource: sim only)", {})
    accuracy: Accuracy | None = setting("what the SMU measures to (default: built-in table)", None)
    results_database: SharedStore | None = setting(
        "a shared PostgreSQL results store besides the run folder: a URL or {url, wait_at_end}",
        None,
    )
    chamber: Chamber | None = setting("the temperature source, if the station has one", None)

    @model_validator(mode="after")
    def _one_form(self) -> StationFile:
        if self.instruments is None:
            if self.instrument is None:
                raise problem("is missing", at="instrument")
            if self.tray is None:
                raise problem("is missing", at="tray")
            return self
        for single in ("instrument", "tray"):
            if getattr(self, single) is not None:
                raise problem(
                    "goes with one instrument; with 'instruments:' each names its channels",
                    at=single,
                )
        return self


def _several(value: Any) -> Any:
    if not isinstance(value, list) or not 1 <= len(value) <= MAX_INSTRUMENTS:
        raise problem(
            f"must be a list of 1 to {MAX_INSTRUMENTS} instruments, each with its channels"
        )
    return value
