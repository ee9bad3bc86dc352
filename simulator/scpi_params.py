"""SCPI program data: lexing parameters and converting them by declared kind.

Kinds (IEEE 488.2 ch 7, SCPI-1999 Vol 1 ch 7): decimal numbers (NRf) with optional unit suffix and
SCPI multipliers (MA = milli when the unit is A: "2 MA" is 2 mA; MOHM and MHZ are the mega
exceptions), MINimum/MAXimum/DEFault, booleans ON|OFF|1|0, character data, quoted strings and
channel lists (@1), (@1,3), (@2:4).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from simulator.errors import ScpiError

MAX_MNEMONIC = 12
MULTIPLIERS = {"": 1.0, "EX": 1e18, "PE": 1e15, "T": 1e12, "G": 1e9, "MA": 1e6, "K": 1e3,
               "M": 1e-3, "U": 1e-6, "N": 1e-9, "P": 1e-12, "F": 1e-15, "A": 1e-18}  # fmt: skip
MEGA_EXCEPTIONS = {"OHM": {"MOHM": 1e6}, "HZ": {"MHZ": 1e6}}
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_WORD = re.compile(r"[A-Za-z][A-Za-z0-9_]*")
_SUFFIX = re.compile(r"[A-Za-z]+")


def mnemonic_forms(spelling: str) -> tuple[str, str]:
    """('VOLT', 'VOLTAGE') from 'VOLTage': the upper-case part is the short form."""
    short = "".join(c for c in spelling if not c.islower())
    return short, spelling.upper()


@dataclass(frozen=True)
class Number:
    value: float
    suffix: str = ""  # upper case


@dataclass(frozen=True)
class Word:
    text: str  # upper case


@dataclass(frozen=True)
class Text:
    text: str


@dataclass(frozen=True)
class ChannelList:
    channels: tuple[int, ...]


Param = Number | Word | Text | ChannelList


def split_outside(text: str, separator: str) -> list[str]:
    """Split on `separator` outside quoted strings and parentheses; -151 on an open quote."""
    if not any(mark in text for mark in "\"'()"):
        return text.split(separator)  # nothing to step around: the common case, at C speed
    parts, start, quote, depth = [], 0, "", 0
    for pos, char in enumerate(text):
        if quote:
            quote = "" if char == quote else quote
        elif char in "\"'":
            quote = char
        elif char in "()":
            depth += 1 if char == "(" else -1
        elif char == separator and depth == 0:
            parts.append(text[start:pos])
            start = pos + 1
    if quote:
        raise ScpiError(-151, "unterminated quoted string")
    parts.append(text[start:])
    return parts


def parse_params(text: str) -> tuple[Param, ...]:
    if not text.strip():
        return ()
    return tuple(lex(token.strip()) for token in split_outside(text, ","))


def lex(token: str) -> Param:
    """One parameter token -> typed program data."""
    if not token:
        raise ScpiError(-102, "empty parameter")
    if token[0] in "\"'":
        return _text(token)
    if token.startswith("("):
        return _channels(token)
    number = _NUMBER.match(token)
    if number:
        suffix = token[number.end() :].strip()
        if suffix and not _SUFFIX.fullmatch(suffix):
            raise ScpiError(-102, token)
        if len(suffix) > MAX_MNEMONIC:
            raise ScpiError(-134, suffix)
        return Number(float(number.group()), suffix.upper())
    if _WORD.fullmatch(token):
        if len(token) > MAX_MNEMONIC:
            raise ScpiError(-144, token)
        return Word(token.upper())
    raise ScpiError(-102, token)


def _text(token: str) -> Text:
    quote = token[0]
    if len(token) < 2 or token[-1] != quote or quote in token[1:-1].replace(quote * 2, ""):
        raise ScpiError(-151, token)
    return Text(token[1:-1].replace(quote * 2, quote))


def _channels(token: str) -> ChannelList:
    match = re.fullmatch(r"\(@\s*(.*?)\s*\)", token)
    if not match:
        raise ScpiError(-102, f"channel list {token}")
    channels: list[int] = []
    for item in filter(None, (part.strip() for part in match.group(1).split(","))):
        first, _, last = item.partition(":")
        if not first.isdigit() or (last and not last.isdigit()):
            raise ScpiError(-102, f"channel list {token}")
        channels.extend(range(int(first), int(last or first) + 1))
    return ChannelList(tuple(channels))


def unit_scale(suffix: str, unit: str | None) -> float:
    """Multiplier a suffix applies to a number whose unit is `unit` (None: no unit allowed)."""
    if not suffix:
        return 1.0
    if unit is None:
        raise ScpiError(-138, suffix)
    if suffix in MEGA_EXCEPTIONS.get(unit, {}):
        return MEGA_EXCEPTIONS[unit][suffix]
    prefix = suffix[: -len(unit)]
    if not suffix.endswith(unit) or prefix not in MULTIPLIERS:
        raise ScpiError(-131, f"{suffix} (expected a multiple of {unit})")
    return MULTIPLIERS[prefix]


def _one(params: tuple[Param, ...]) -> Param:
    if not params:
        raise ScpiError(-109)
    if len(params) > 1:
        raise ScpiError(-108, "one parameter expected")
    return params[0]


def _is(word: Param, spelling: str) -> bool:
    return isinstance(word, Word) and word.text in mnemonic_forms(spelling)


@dataclass(frozen=True)
class Numeric:
    """A numeric setting: unit, accepted range, and what MINimum/MAXimum/DEFault stand for."""

    unit: str | None
    lo: float
    hi: float
    default: float | None = None
    least: float | None = None  # what MIN means when it is not `lo`
    integer: bool = False

    def special(self, param: Param) -> float | None:
        """The value of MIN / MAX / DEF, or None if `param` is not one of them."""
        if _is(param, "MINimum"):
            return self.lo if self.least is None else self.least
        if _is(param, "MAXimum"):
            return self.hi
        if _is(param, "DEFault") and self.default is not None:
            return self.default
        return None

    def convert(self, params: tuple[Param, ...]) -> float:
        param = _one(params)
        if not isinstance(param, Number):  # a number is never MIN, MAX or DEF
            value = self.special(param)
            if value is not None:
                return value
            if isinstance(param, Word):
                raise ScpiError(-141, param.text)
            raise ScpiError(-104, "a number was expected")
        value = param.value * unit_scale(param.suffix, self.unit)
        value = float(round(value)) if self.integer else value
        if not self.lo <= value <= self.hi:
            raise ScpiError(-222, f"{value:g} not in {self.lo:g}..{self.hi:g}")
        return value


@dataclass(frozen=True)
class Boolean:
    def convert(self, params: tuple[Param, ...]) -> bool:
        param = _one(params)
        if isinstance(param, Number):
            if param.suffix:
                raise ScpiError(-138, param.suffix)
            return round(param.value) != 0
        if _is(param, "ON") or _is(param, "OFF"):
            return _is(param, "ON")
        if isinstance(param, Word):
            raise ScpiError(-141, param.text)
        raise ScpiError(-104, "ON, OFF, 1 or 0 expected")


@dataclass(frozen=True)
class Choice:
    """Character data from a fixed set, given as SCPI spellings; converts to the spelling."""

    options: tuple[str, ...]

    def convert(self, params: tuple[Param, ...]) -> str:
        param = _one(params)
        if not isinstance(param, Word):
            raise ScpiError(-104, "character data expected")
        for option in self.options:
            if _is(param, option):
                return option
        raise ScpiError(-141, param.text)


@dataclass(frozen=True)
class Strings:
    """One or more quoted strings."""

    def convert(self, params: tuple[Param, ...]) -> tuple[str, ...]:
        if not params:
            raise ScpiError(-109)
        if not all(isinstance(p, Text) for p in params):
            raise ScpiError(-104, "quoted strings expected")
        return tuple(p.text for p in params if isinstance(p, Text))


@dataclass(frozen=True)
class Channels:
    def convert(self, params: tuple[Param, ...]) -> tuple[int, ...]:
        param = _one(params)
        if not isinstance(param, ChannelList):
            raise ScpiError(-104, "a channel list (@n) was expected")
        return param.channels


@dataclass(frozen=True)
class NumericList:
    """One or more numbers of the same kind (a source list); too many gives -223."""

    item: Numeric
    max_count: int

    def convert(self, params: tuple[Param, ...]) -> tuple[float, ...]:
        if not params:
            raise ScpiError(-109)
        if len(params) > self.max_count:
            raise ScpiError(-223, f"{len(params)} values, at most {self.max_count}")
        return tuple(self.item.convert((param,)) for param in params)


@dataclass(frozen=True)
class Choices:
    """One or more distinct items of a fixed set of character data, in the order given."""

    options: tuple[str, ...]

    def convert(self, params: tuple[Param, ...]) -> tuple[str, ...]:
        if not params:
            raise ScpiError(-109)
        chosen = tuple(Choice(self.options).convert((param,)) for param in params)
        if len(set(chosen)) != len(chosen):
            raise ScpiError(-224, "an item is given twice")
        return chosen


@dataclass(frozen=True)
class DataType:
    """FORMat[:DATA]: ASCii, or REAL with an optional length that must be 32."""

    def convert(self, params: tuple[Param, ...]) -> str:
        if not params or len(params) > 2:
            raise ScpiError(-109 if not params else -108)
        kind = Choice(("ASCii", "REAL")).convert(params[:1])
        if len(params) == 2:
            length = params[1]
            if kind != "REAL" or not isinstance(length, Number) or length.suffix:
                raise ScpiError(-104, "FORM REAL takes a length of 32")
            if length.value != 32:
                raise ScpiError(-224, f"REAL,{length.value:g} (only REAL,32)")
        return kind


Spec = Numeric | Boolean | Choice | Strings | Channels | NumericList | Choices | DataType
