"""SCPI program messages -> message units -> commands of a declarative command tree.

Header rules (SCPI-1999 Vol 1 ch 6, IEEE 488.2 ch 7):
- a mnemonic matches only its exact short or exact long form, in any case (MEASU -> -113);
- optional nodes are written in [ ] in a command's pattern and may be left out;
- a numeric suffix may follow any mnemonic; only 1 exists on this instrument (else -114);
- `;` separates message units; a following header is relative to the node before the last
  mnemonic of the previous header, a leading `:` returns to the root, and common `*` commands
  neither use nor change that path.

A driver sends the same few message texts again and again, so a message's units are parsed
and looked up once per text (`prepare`) and a command's converted parameters kept after their
first use (`Prepared`): parsing and conversion depend on the text alone. Texts longer than
CACHED_TEXT_CHARS (long source lists) and texts that fail to split are worked out every time.
"""

from __future__ import annotations

import itertools
import re
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

from simulator.errors import ScpiError
from simulator.scpi_params import (
    MAX_MNEMONIC,
    Numeric,
    Param,
    Spec,
    mnemonic_forms,
    parse_params,
    split_outside,
)

_MNEMONIC = re.compile(r"([A-Za-z][A-Za-z_]*?)(\d*)")
_COMMON = re.compile(r"\*[A-Za-z]+")
_UNIT = re.compile(r"\s*(\S*)\s*(.*)", re.DOTALL)
_PATTERN_NODE = re.compile(r"\[:?([*A-Za-z]+):?\]|:?([*A-Za-z]+)")
CACHED_TEXT_CHARS = 2048  # an 81-level source list is about 1,100 characters
CACHED_TEXTS = 512  # per cache: at most about 1 MB of text each


@dataclass(frozen=True)
class Command:
    """One node of the command tree: its pattern, how its parameter is read, what it does.

    `set(instrument[, value])` runs the command form; `query(instrument[, value])` returns the
    reply text of the query form. `spec` converts the command form's parameters (no spec: none
    allowed), `query_spec` those of the query form; a query of a Numeric setting also answers
    MIN, MAX and DEF.
    """

    pattern: str
    set: Callable[..., None] | None = None
    query: Callable[..., str] | None = None
    spec: Spec | None = None
    query_spec: Spec | None = None


@dataclass(frozen=True)
class Header:
    path: tuple[tuple[str, int | None], ...]  # (mnemonic upper case, numeric suffix or None)
    query: bool
    common: bool
    absolute: bool
    text: str


@dataclass(frozen=True)
class Unit:
    header: Header
    params: tuple[Param, ...]


def split_units(message: str) -> list[str]:
    """The non-empty message units of one program message."""
    return [unit for unit in split_outside(message, ";") if unit.strip()]


def parse_unit(text: str) -> Unit:
    if len(text) > CACHED_TEXT_CHARS:
        return _parse_unit(text)
    return _parse_unit_cached(text)


def _parse_unit(text: str) -> Unit:
    head, rest = _UNIT.fullmatch(text).groups()
    return Unit(parse_header(head), parse_params(rest))


_parse_unit_cached = lru_cache(maxsize=CACHED_TEXTS)(_parse_unit)


def parse_header(text: str) -> Header:
    query = text.endswith("?")
    body = text[:-1] if query else text
    if _COMMON.fullmatch(body):
        return Header(((body.upper(), None),), query, True, True, text)
    absolute = body.startswith(":")
    path = tuple(_mnemonic(part, text) for part in (body[1:] if absolute else body).split(":"))
    return Header(path, query, False, absolute, text)


def _mnemonic(part: str, header: str) -> tuple[str, int | None]:
    match = _MNEMONIC.fullmatch(part)
    if not match:
        raise ScpiError(-102, header)
    base, digits = match.groups()
    if len(base) > MAX_MNEMONIC:
        raise ScpiError(-112, header)
    return base.upper(), int(digits) if digits else None


class CommandTree:
    """Looks typed headers up among every spelling of every pattern (built once)."""

    def __init__(self, commands: Iterable[Command]) -> None:
        self._lookup: dict[tuple[str, ...], Command] = {}
        for command in commands:
            for key in _spellings(command.pattern):
                if key in self._lookup:
                    raise ValueError(f"{command.pattern} collides with {self._lookup[key].pattern}")
                self._lookup[key] = command

    def resolve(self, header: Header, prefix: tuple[tuple[str, int | None], ...]):
        """(command, full typed path) for a header, given the current path prefix."""
        path = header.path if header.absolute else prefix + header.path
        command = self._lookup.get(tuple(name for name, _ in path))
        if command is None:
            raise ScpiError(-113, header.text)
        if any(suffix not in (None, 1) for _, suffix in path):
            raise ScpiError(-114, header.text)
        return command, path


def _spellings(pattern: str) -> Iterable[tuple[str, ...]]:
    """Every key a pattern answers to: optional nodes in or out, each node short or long."""
    found = _PATTERN_NODE.finditer(pattern)
    nodes = [(m.group(1) or m.group(2), m.group(1) is not None) for m in found]
    choices: list[list[tuple[str, ...]]] = []
    for spelling, optional in nodes:
        forms = tuple(dict.fromkeys(mnemonic_forms(spelling)))
        choices.append([(form,) for form in forms] + ([()] if optional else []))
    for combo in itertools.product(*choices):
        key = tuple(itertools.chain.from_iterable(combo))
        if key:
            yield key


_UNCONVERTED = object()


class Prepared:
    """One message unit, parsed and resolved, ready to run; the command form's converted
    parameters are kept once they converted (a failed conversion is tried again next time)."""

    __slots__ = ("_value", "command", "unit")

    def __init__(self, unit: Unit, command: Command) -> None:
        self.unit = unit
        self.command = command
        self._value: Any = _UNCONVERTED

    def run(self, instrument: Any) -> str | None:
        """Execute the unit; the reply text for a query, None for a command."""
        unit, command = self.unit, self.command
        if unit.header.query:
            return _run_query(command, unit, instrument)
        if command.set is None:
            raise ScpiError(-113, f"{unit.header.text} has only a query form")
        if command.spec is None:
            if unit.params:
                raise ScpiError(-108, unit.header.text)
            command.set(instrument)
            return None
        value = self._value
        if value is _UNCONVERTED:
            value = self._value = command.spec.convert(unit.params)
        command.set(instrument, value)
        return None


def run_unit(command: Command, unit: Unit, instrument: Any) -> str | None:
    """Execute one message unit; the reply text for a query, None for a command."""
    return Prepared(unit, command).run(instrument)


def is_command_error(error: ScpiError) -> bool:
    """-1xx: the rest of the program message is discarded (IEEE 488.2)."""
    return -199 <= error.code <= -100


def prepare(message: str, tree: CommandTree) -> tuple[Prepared | ScpiError, ...]:
    """A program message's units, parsed and resolved in order; a unit that fails is its
    ScpiError, and after a command error nothing more is parsed, as nothing more would run.
    ScpiError (-151) if the message cannot be split into units."""
    if len(message) > CACHED_TEXT_CHARS:
        return _prepare(message, tree)
    return _prepare_cached(message, tree)


def _prepare(message: str, tree: CommandTree) -> tuple[Prepared | ScpiError, ...]:
    steps: list[Prepared | ScpiError] = []
    prefix: tuple[tuple[str, int | None], ...] = ()
    for text in split_units(message):
        try:
            unit = parse_unit(text)
            command, path = tree.resolve(unit.header, prefix)
        except ScpiError as error:
            steps.append(error.with_traceback(None))  # kept: hold no frames
            if is_command_error(error):
                break
            continue
        prefix = prefix if unit.header.common else path[:-1]
        steps.append(Prepared(unit, command))
    return tuple(steps)


_prepare_cached = lru_cache(maxsize=CACHED_TEXTS)(_prepare)


def _run_query(command: Command, unit: Unit, instrument: Any) -> str:
    if command.query is None:
        raise ScpiError(-113, f"{unit.header.text} has no query form")
    if not unit.params:
        return command.query(instrument)
    if command.query_spec is not None:
        return command.query(instrument, command.query_spec.convert(unit.params))
    if isinstance(command.spec, Numeric) and len(unit.params) == 1:
        value = command.spec.special(unit.params[0])
        if value is not None:
            return f"{value:+.6E}"
    raise ScpiError(-108, unit.header.text)
