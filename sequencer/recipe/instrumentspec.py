"""The station's instruments: one SMU (`instrument:` with `tray:`) or several (`instruments:`),
each with the tray channels wired to it.

    instrument: {resource: sim, dialect: scpi1999, timeout: 2 s, line_frequency: 50 Hz}
    tray: {channels: 1-20}

    instruments:                       # several SMUs, tested in parallel (sequencer.bench.parallel)
      - {name: bay-1, resource: "TCPIP0::192.0.2.17::5025::SOCKET", channels: 1-10}
      - {name: bay-2, resource: "TCPIP0::192.0.2.18::5025::SOCKET", channels: 11-20}

Either form may give `write_time` and `query_time`, what one SCPI write and one query round
trip cost on that instrument, for the run's time estimate (sequencer.run.estimate). Every entry of
`instruments:` takes the keys of `instrument:` plus `channels` (a count, a list or a range) and
an optional `name`; no channel may belong to two instruments, and all share one line frequency
(the plan's aperture is one number). With `resource: sim` each entry gets its own embedded
simulator serving the same simulated lot, so channel 12 is the same device whichever SMU it is
wired to.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sequencer.recipe.fields import Fields, show
from sequencer.recipe.linkspec import NO_LINK_SETTINGS, LinkSettings, parse_link
from sequencer.recipe.yamlsource import Source

DEFAULT_DIALECT = "scpi1999"
SIM_RESOURCE = "sim"  # the embedded simulator (instruments.SIM_RESOURCE)
MAX_INSTRUMENTS = 32


@dataclass(frozen=True)
class InstrumentSpec:
    """One SMU of a station and the tray channels wired to it."""

    name: str
    resource: str
    dialect: str
    timeout_s: float
    line_frequency_hz: float
    channels: tuple[int, ...]
    write_time_s: float | None = None  # what one write / query costs, for estimates
    query_time_s: float | None = None  # (None: sequencer.run.estimate's measured defaults)
    link: LinkSettings = NO_LINK_SETTINGS  # VISA library, terminators, serial (linkspec.py)

    def __post_init__(self) -> None:
        if not self.channels:
            raise ValueError("an instrument needs at least one channel")


def instrument_specs(source: Source, top: Fields, folder: Path) -> tuple[InstrumentSpec, ...]:
    """The station's instruments from either form; `top` is the station's top-level mapping."""
    if "instruments" not in top.data:
        inst = Fields.at(source, "instrument", top.raw("instrument"))
        settings, timing = _settings(inst, folder), _timing(inst)
        link = parse_link(inst, settings[0])
        inst.finish()
        channels = parse_channels(source, "tray", top.raw("tray"))
        return (InstrumentSpec("smu", *settings, channels, *timing, link=link),)
    for single in ("instrument", "tray"):
        if single in top.data:
            problem = "goes with one instrument; with 'instruments:' each names its channels"
            raise source.error(single, problem)
    return _several(source, top.raw("instruments"), folder)


def _several(source: Source, value: Any, folder: Path) -> tuple[InstrumentSpec, ...]:
    if not isinstance(value, list) or not 1 <= len(value) <= MAX_INSTRUMENTS:
        problem = f"must be a list of 1 to {MAX_INSTRUMENTS} instruments, each with its channels"
        raise source.error("instruments", problem)
    specs: list[InstrumentSpec] = []
    for index, item in enumerate(value):
        f = Fields.at(source, f"instruments[{index}]", item)
        name = f.text("name", f"smu{index + 1}")
        settings, timing = _settings(f, folder), _timing(f)
        link = parse_link(f, settings[0])
        f.used.add("channels")
        channels = parse_channels(source, f.where("channels"), {"channels": f.raw("channels")})
        f.finish()
        specs.append(InstrumentSpec(name, *settings, channels, *timing, link=link))
        _check_against_earlier(source, index, specs)
    return tuple(specs)


def _check_against_earlier(source: Source, index: int, specs: list[InstrumentSpec]) -> None:
    spec, earlier = specs[-1], specs[:-1]
    where = f"instruments[{index}]"
    for other in earlier:
        shared = sorted(set(spec.channels) & set(other.channels))
        if shared:
            raise source.error(f"{where}.channels", f"shares channel {shared[0]} with {other.name}")
        if other.name == spec.name:
            raise source.error(f"{where}.name", f"repeats the instrument name '{spec.name}'")
        if spec.resource != SIM_RESOURCE and same_resource(other.resource, spec.resource):
            problem = f"names the instrument {other.name} already uses ({show(other.resource)})"
            raise source.error(f"{where}.resource", problem + "; two workers would drive one SMU")
        if other.line_frequency_hz != spec.line_frequency_hz:
            problem = f"must be the same for every instrument ({other.line_frequency_hz:g} Hz)"
            raise source.error(f"{where}.line_frequency", problem)


def same_resource(a: str, b: str) -> bool:
    """Two VISA resource strings that open the same instrument: VISA names are case-blind and
    board 0 may be left out (`TCPIP::h::5025::SOCKET` is `tcpip0::h::5025::socket`)."""
    return _resource_key(a) == _resource_key(b)


def _resource_key(resource: str) -> tuple[str, ...]:
    interface, *rest = resource.strip().upper().split("::")
    board = interface.rstrip("0123456789")
    number = interface[len(board) :] or "0"
    return (board, str(int(number)), *(part.strip() for part in rest))


def _settings(f: Fields, folder: Path) -> tuple[str, str, float, float]:
    """resource, dialect (a path made absolute), timeout and line frequency of one entry."""
    resource = _resource(f)
    dialect = f.text("dialect", DEFAULT_DIALECT)
    if dialect != DEFAULT_DIALECT and not Path(dialect).is_absolute():
        dialect = str((folder / dialect).resolve())
    timeout_s = f.quantity("timeout", "time", "2 s")
    f.check(0.05 <= timeout_s <= 60, "timeout", f"must be 50 ms to 60 s (got {timeout_s} s)")
    line_hz = f.quantity("line_frequency", "frequency", "50 Hz")
    f.check(line_hz in (50.0, 60.0), "line_frequency", f"must be 50 Hz or 60 Hz (got {line_hz})")
    return resource, dialect, timeout_s, line_hz


def _resource(f: Fields) -> str:
    """`sim`, or text that can name an instrument (checked before anything is opened)."""
    value = f.raw("resource")
    if value == SIM_RESOURCE:
        return value
    # Start-up speed: instruments.transport loads pyvisa; only a station with a resource needs it.
    from instruments.transport import RESOURCE_HINT, resource_problem

    problem = resource_problem(value) if isinstance(value, str) else "is not text"
    hint = f"{RESOURCE_HINT}, or {SIM_RESOURCE} for the simulator"
    f.check(not problem, "resource", f"{problem}: {hint} (got {show(value)})")
    return value


def _timing(f: Fields) -> tuple[float | None, float | None]:
    """`write_time` and `query_time`: measured on the bench, they make estimates honest."""
    out = []
    for key in ("write_time", "query_time"):
        value = f.optional_quantity(key, "time")
        f.check(value is None or 0 < value <= 1, key, f"must be above 0 and at most 1 s ({value})")
        out.append(value)
    return out[0], out[1]


# A tray or switch matrix of a bench has tens to a few thousand positions; a lot measured one
# position after another (a handler, or a dry run of a whole lot on the simulator) has up to
# some hundred thousand. More is a slip of the keyboard.
MAX_CHANNELS = 1_000_000


def parse_channels(source: Source, path: str, value: Any) -> tuple[int, ...]:
    """`{channels: ...}` at `path`: a count, a list of channels or a range '1-20'."""
    tray = Fields.at(source, path, value)
    raw = tray.raw("channels")
    tray.finish()
    where = f"{path}.channels" if not path.endswith("channels") else path
    channels = _channels(raw)
    if channels is None:
        problem = f"must be a count, a list of channels or a range '1-20' (got {raw!r})"
        raise source.error(where, problem)
    if len(channels) > MAX_CHANNELS:
        raise source.error(where, f"names {len(channels)} channels; at most {MAX_CHANNELS}")
    if len(set(channels)) != len(channels):
        raise source.error(where, "lists a channel twice")
    return tuple(channels)


def _channels(raw: Any) -> tuple[int, ...] | range | None:
    if isinstance(raw, int) and not isinstance(raw, bool) and raw > 0:
        return range(1, raw + 1)
    if isinstance(raw, list) and raw and all(_channel(c) for c in raw):
        return tuple(raw)
    if isinstance(raw, str) and "-" in raw:
        first, _, last = raw.partition("-")
        if first.strip().isdigit() and last.strip().isdigit() and 0 < int(first) <= int(last):
            return range(int(first), int(last) + 1)
    return None


def _channel(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value > 0
