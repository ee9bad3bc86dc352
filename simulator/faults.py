"""Fault injection: a seeded schedule of things that go wrong, for robustness tests.

A fault waits for matching message units (or acquisitions), lets `after` of them pass, then
fires `count` times. Kinds:

  wire faults: act on the reply of the program message that holds the matching unit
    no-reply      the message is executed; its reply is never sent
    late-reply    the message is executed; its reply is sent `delay` seconds late, and the
                  connection reads nothing else meanwhile (a busy instrument)
    close         the connection is closed at once; the message is not executed
    garbage       the reply is replaced by one line of seeded junk (a message without a
                  query gets that line anyway: the client reads it as its next reply)
  instrument faults: act on the instrument, then the unit runs as usual
    error         the unit is refused with SCPI error `code` (not executed); on `point`, the
                  error is queued and the acquisition goes on
    lid-open      the fixture lid opens: a level above the touch-safe threshold is forced off
    device-open   the device on `channel` (default: the connected one) becomes an open circuit
    device-short  ... becomes a short circuit

Keys of one fault (all but `kind` optional):
    kind     one of the kinds above
    on       SCPI header(s) to wait for, in any spelling the instrument accepts, alternatives
             joined by `|` (`READ?`, `SOUR:VOLT`, `READ?|MEAS:CURR?`). A trailing `?` matches
             only the query form, none matches both forms. The word `point` matches every
             acquisition, each point of a list run included (instrument faults only).
             Default: every message unit. SIMulation:* units never count.
    after    matching units to let pass before the first firing (default 0)
    channel  count only while this tray channel is connected; for device faults, the device
    delay    late-reply delay in seconds: a number, or text with s or ms (default 3 s)
    code     SCPI error number for `error` (default -200), one of data/scpi_errors.yaml
    count    firings, then the fault is spent (default 1; 0 = every match from then on)
    chance   probability 0 < p <= 1 that a due match fires (default 1), drawn from the
             fault's own stream of the simulator seed: the same traffic, the same firings

Text form (command line `--fault`, SCPI `SIMulation:FAULt "<text>"`):
    KIND[:KEY=VALUE[,KEY=VALUE]...]     e.g.  late-reply:on=READ?,after=10,delay=2.5
YAML form (`--faults FILE`, station `simulator: faults:`): a list of mappings with the keys
above, or of text forms; a file may also hold a mapping with the list under `faults:`. Quote a
header with `?` inside a flow mapping ({kind: no-reply, on: "READ?"}); a bare `on:` key, which
YAML 1.1 reads as true, is understood as `on`.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from simulator.errors import OptionError, ScpiError, error_texts
from simulator.scpi_parser import Command, CommandTree, parse_header

WIRE_KINDS = ("no-reply", "late-reply", "close", "garbage")
INSTRUMENT_KINDS = ("error", "lid-open", "device-open", "device-short")
KINDS = WIRE_KINDS + INSTRUMENT_KINDS
KEYS = ("kind", "on", "after", "channel", "delay", "code", "count", "chance")
POINT = "point"  # the `on` word for "every acquisition"
DEFAULT_DELAY_S = 3.0  # beyond the driver's default 2 s timeout
DEFAULT_CODE = -200
MAX_DELAY_S = 600.0
FAULT_STREAM = 0xFA17  # keeps fault draws apart from the lot and noise streams of one seed
_GARBAGE = "!$%&()*<>@[]^_{}~ABCDFGHJKLPQRTWXZ"  # never a number, a boolean or a block
_DURATION = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(ms|s)?\s*", re.I)


def _fault_error(problem: str) -> OptionError:
    return OptionError("fault", problem)


@dataclass(frozen=True)
class FaultSpec:
    """One scheduled fault (see the module docstring); validated on construction."""

    kind: str
    on: str | None = None
    after: int = 0
    channel: int | None = None
    delay_s: float = DEFAULT_DELAY_S
    code: int = DEFAULT_CODE
    count: int = 1
    chance: float = 1.0

    def __post_init__(self) -> None:
        problem = self._problem()
        if problem:
            raise _fault_error(f"{problem} (in {self.text()!r})")

    def _problem(self) -> str | None:
        if self.kind not in KINDS:
            return f"unknown kind {self.kind!r} (known: {', '.join(KINDS)})"
        if self.on is not None and (not all(self.alternatives()) or re.search("[,=]", self.on)):
            return "'on' needs SCPI headers joined by '|' (no empty one, no ',' or '=')"
        if self.on_point and self.kind in WIRE_KINDS:
            return f"'on=point' needs an instrument fault ({', '.join(INSTRUMENT_KINDS)})"
        checks = (
            (self.after >= 0, "'after' must be >= 0"),
            (self.channel is None or self.channel >= 1, "'channel' must be >= 1"),
            (0 <= self.delay_s <= MAX_DELAY_S, f"'delay' must be 0..{MAX_DELAY_S:g} s"),
            (self.code in error_texts() and self.code != 0, "'code' is not a known SCPI error"),
            (self.count >= 0, "'count' must be >= 0 (0: every match)"),
            (0 < self.chance <= 1, "'chance' must be in (0, 1]"),
        )
        return next((problem for ok, problem in checks if not ok), None)

    @property
    def on_point(self) -> bool:
        return self.on is not None and self.on.strip().lower() == POINT

    def alternatives(self) -> list[str]:
        return [] if self.on is None else [part.strip() for part in self.on.split("|")]

    def text(self) -> str:
        """The text form; `parse_fault(spec.text()) == spec`."""
        parts = []
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name != "kind" and value != f.default:
                parts.append(f"{_key(f.name)}={value!r}" if isinstance(value, float) else
                             f"{_key(f.name)}={value}")  # fmt: skip
        return self.kind + (":" + ",".join(parts) if parts else "")


def _key(name: str) -> str:
    return "delay" if name == "delay_s" else name


def parse_fault(text: str) -> FaultSpec:
    """A fault from its text form `KIND[:KEY=VALUE,...]`."""
    kind, _, rest = text.strip().partition(":")
    values: dict[str, str] = {}
    for item in filter(None, (part.strip() for part in rest.split(","))):
        key, sep, value = item.partition("=")
        if not sep:
            raise _fault_error(f"{item!r} in {text!r} is not KEY=VALUE")
        values[key.strip().lower()] = value.strip()
    return fault_from_mapping({"kind": kind.strip().lower(), **values})


def fault_from_mapping(mapping: Mapping[Any, Any]) -> FaultSpec:
    """A fault from a mapping of the keys in KEYS (values as YAML or text gives them).

    YAML 1.1 reads a bare `on:` key as the boolean true; such a key is taken as `on`.
    """
    raw = {("on" if key is True or key == "True" else key): v for key, v in mapping.items()}
    unknown = [key for key in raw if key not in KEYS]
    if unknown:
        raise _fault_error(f"unknown key {unknown[0]!r} (known: {', '.join(KEYS)})")
    if "kind" not in raw:
        raise _fault_error(f"needs a 'kind' (one of {', '.join(KINDS)})")
    values: dict[str, Any] = {"kind": str(raw["kind"]).strip().lower()}
    for key in ("after", "count", "code", "channel"):
        if key in raw:
            values[key] = _integer(key, raw[key])
    if "chance" in raw:
        values["chance"] = _number("chance", raw["chance"])
    if "delay" in raw:
        values["delay_s"] = parse_duration(raw["delay"])
    if "on" in raw:
        values["on"] = str(raw["on"]).strip()
    return FaultSpec(**values)


def fault_from_item(item: Any) -> FaultSpec:
    """A fault from one YAML list item: a mapping or a text form."""
    if isinstance(item, str):
        return parse_fault(item)
    if isinstance(item, Mapping):
        return fault_from_mapping(item)
    raise _fault_error(f"a fault is a mapping or a text form (got {item!r})")


def load_faults(path: str | Path) -> tuple[FaultSpec, ...]:
    """The faults listed in a YAML file (a list, or a mapping holding it under `faults:`)."""
    try:
        data = yaml.safe_load(Path(path).read_text(encoding="utf-8"))
    except (OSError, yaml.YAMLError) as exc:
        raise _fault_error(f"cannot read {path}: {exc}") from exc
    if isinstance(data, Mapping) and set(data) == {"faults"}:
        data = data["faults"]
    if not isinstance(data, list):
        raise _fault_error(f"{path} must hold a list of faults (or faults: [...])")
    return tuple(fault_from_item(item) for item in data)


def parse_duration(value: Any) -> float:
    """Seconds from a number or text like '2.5', '2.5 s', '500ms'."""
    if isinstance(value, int | float) and not isinstance(value, bool):
        return float(value)
    match = _DURATION.fullmatch(str(value))
    if not match:
        raise _fault_error(f"'delay' must be seconds, e.g. 2.5 or 500ms (got {value!r})")
    number, unit = match.groups()
    return float(number) * (1e-3 if (unit or "s").lower() == "ms" else 1.0)


def _integer(key: str, value: Any) -> int:
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = float("nan")
    if isinstance(value, bool) or not number.is_integer():
        raise _fault_error(f"{key!r} must be a whole number (got {value!r})")
    return int(number)


def _number(key: str, value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        raise _fault_error(f"{key!r} must be a number (got {value!r})") from None


@dataclass(frozen=True)
class Firing:
    """A fault that fired: what to do, and where. `garbage` is the junk line, if any."""

    spec: FaultSpec
    index: int  # position of the fault in the schedule (arming order)
    channel: int | None  # the connected channel when it fired
    header: str  # the header (or `point`) that triggered it
    garbage: str | None = None

    @property
    def kind(self) -> str:
        return self.spec.kind

    @property
    def on_wire(self) -> bool:
        return self.spec.kind in WIRE_KINDS


@dataclass
class _Armed:
    spec: FaultSpec
    index: int
    targets: frozenset[tuple[int, bool | None]] | None  # (id of command, query?) or any
    rng: np.random.Generator
    seen: int = 0
    fired: int = 0

    @property
    def spent(self) -> bool:
        return self.spec.count > 0 and self.fired >= self.spec.count


@dataclass
class FaultSchedule:
    """The armed faults of one instrument. Shared by all connections; call under its lock.

    `tree` is the command tree that `on:` patterns are resolved against; it is handed in (by
    `simulator.options` or the first `Session` that serves the instrument) rather than imported,
    since the tree's commands themselves arm faults."""

    seed: int = 1
    tree: CommandTree | None = None
    fired: list[Firing] = field(default_factory=list)
    _armed: list[_Armed] = field(default_factory=list)
    _next: int = 0

    @classmethod
    def of(
        cls, specs: Iterable[FaultSpec], seed: int = 1, tree: CommandTree | None = None
    ) -> FaultSchedule:
        schedule = cls(seed, tree)
        for spec in specs:
            schedule.arm(spec)
        return schedule

    def arm(self, spec: FaultSpec) -> None:
        """Add a fault; its counting starts now. OptionError if `on` names no command."""
        targets = None if spec.on is None or spec.on_point else self._targets(spec)
        rng = np.random.default_rng([FAULT_STREAM, self.seed, self._next])
        self._armed.append(_Armed(spec, self._next, targets, rng))
        self._next += 1

    def clear(self) -> None:
        self._armed.clear()

    @property
    def pending(self) -> int:
        return sum(not armed.spent for armed in self._armed)

    @property
    def waits_for_points(self) -> bool:
        """Whether a fault still waits for an acquisition (`on: point`)."""
        return any(armed.spec.on_point and not armed.spent for armed in self._armed)

    def on_unit(self, command: Command, query: bool, channel: int | None, header: str):
        """Faults that fire on this message unit, in arming order."""
        if not self._armed:
            return []
        if command.pattern.upper().startswith("SIMULATION"):
            return []
        due = [a for a in self._armed if not a.spec.on_point and _targets(a, command, query)]
        return self._fire(due, channel, header)

    def on_point(self, channel: int | None) -> list[Firing]:
        """Faults that fire on this acquisition."""
        return self._fire([a for a in self._armed if a.spec.on_point], channel, POINT)

    def _fire(self, due: list[_Armed], channel: int | None, header: str) -> list[Firing]:
        firings = []
        for armed in due:
            spec = armed.spec
            if armed.spent or (spec.channel is not None and spec.channel != channel):
                continue
            armed.seen += 1
            if armed.seen <= spec.after:
                continue
            if spec.chance < 1 and armed.rng.random() >= spec.chance:
                continue
            armed.fired += 1
            junk = _garbage(armed.rng) if spec.kind == "garbage" else None
            firings.append(Firing(spec, armed.index, channel, header, junk))
        self.fired.extend(firings)
        return firings

    def _targets(self, spec: FaultSpec) -> frozenset[tuple[int, bool | None]]:
        tree = self.tree
        if tree is None:
            raise _fault_error(f"on {spec.on!r} needs the command tree: arm it through a session")
        found = set()
        for pattern in spec.alternatives():
            try:
                header = parse_header(pattern)
                command, _ = tree.resolve(header, ())
            except ScpiError:
                raise _fault_error(f"on {pattern!r} is not a command of this instrument") from None
            found.add((id(command), True if header.query else None))
        return frozenset(found)


def _targets(armed: _Armed, command: Command, query: bool) -> bool:
    if armed.targets is None:
        return True
    return (id(command), None) in armed.targets or (query and (id(command), True) in armed.targets)


def _garbage(rng: np.random.Generator) -> str:
    length = int(rng.integers(6, 25))
    return "?" + "".join(rng.choice(list(_GARBAGE), length - 1))
