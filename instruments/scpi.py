"""SCPI text helpers: NR3 numbers for commands, reply parsing, error entries, IEEE 488.2 blocks.

Pure functions of strings and bytes; nothing here does I/O. Parse failures raise `ReplyError`,
whose `resource` and `command` are filled in by the caller that knows them (see `reply_error`).
"""

from __future__ import annotations

import math
import re

import numpy as np

from instruments.errors import ReplyError, in_part

# SCPI-1999 Vol 1 7.2.1.4-7.2.1.5: the numbers that stand for INFinity, NINFinity and NAN.
SCPI_INF = 9.9e37
SCPI_NAN = 9.91e37

# <NRf> as IEEE 488.2 7.7.2 allows in a reply (NR1, NR2, NR3), nothing Python adds (no "1_0").
# One way to match each text: `\d+\.?\d*` split a digit run two ways and backtracked
# quadratically on a long run of digits with a stray character (3 MB took minutes).
_NRF = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
# No NRf field needs more: 17 significant digits, sign, point and a three-digit exponent.
_LONGEST_NUMBER = 64
_NR1 = re.compile(r"[+-]?\d+")
_ERROR_ENTRY = re.compile(r'([+-]?\d+)\s*,\s*"((?:[^"]|"")*)"')
# Some instruments send the entry's text without quotes: -113,Undefined header
_BARE_ENTRY = re.compile(r'([+-]?\d+)\s*,\s*([^"]*)')


def reply_error(text: str, expected: str) -> ReplyError:
    """A ReplyError for `text` that was supposed to be `expected`; the caller adds where."""
    return ReplyError("", None, f"reply {in_part(text)} is not {expected}")


def check_message(message: str) -> str:
    """Refuse a message with its own terminator: it would be two program messages."""
    if "\n" in message:
        raise ValueError(f"SCPI message {message!r} must not contain a newline")
    return message


def format_number(value: float) -> str:
    """NR3 text for a command, e.g. 2.5 -> '2.500000E+00'; exact: float(result) == value.

    Six decimals are the minimum (readable logs); more are used only when needed to round-trip.
    Infinities and NaN are refused: sending them to a source is always a bug upstream.
    """
    number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"cannot send {number!r} to an instrument: only finite numbers")
    for decimals in range(6, 17):
        text = f"{number:.{decimals}E}"
        if float(text) == number:
            return text
    return f"{number:.16E}"  # 17 significant digits always round-trip (IEEE 754 double)


def parse_number(text: str) -> float:
    """A float from an NRf reply field, mapping SCPI's special values to inf, -inf and nan."""
    field = text.strip()
    if len(field) > _LONGEST_NUMBER or not _NRF.fullmatch(field):
        raise reply_error(text, "a number")
    number = float(field)
    if number == SCPI_NAN:
        return math.nan
    if abs(number) == SCPI_INF:
        return math.copysign(math.inf, number)
    return number


def special_values(values: np.ndarray) -> np.ndarray:
    """SCPI's special numbers in an array (as float32 blocks carry them) -> inf, -inf, nan."""
    out = np.asarray(values, dtype=float).copy()
    near = 1e-5 * SCPI_INF  # float32 keeps them within 1e-7; 9.9E+37 and 9.91E+37 are 1e-3 apart
    infinite = np.abs(np.abs(out) - SCPI_INF) < near
    out[infinite] = np.copysign(np.inf, out[infinite])
    out[np.abs(out - SCPI_NAN) < near] = np.nan
    return out


def parse_int(text: str) -> int:
    """An integer from an NR1 reply field (registers, counts); '+2' and '2' both work."""
    field = text.strip()
    if not _NR1.fullmatch(field):
        raise reply_error(text, "an integer (NR1)")
    return int(field)


def parse_bool(text: str, *, words: bool = False) -> bool:
    """A boolean reply: SCPI answers boolean queries with 1 or 0; with `words`, ON and OFF
    (any case) are taken as well, as some instruments answer."""
    field = text.strip()
    if words and field.upper() in ("ON", "OFF"):
        return field.upper() == "ON"
    if field not in ("0", "1"):
        raise reply_error(text, "a boolean (1 or 0, or ON/OFF)" if words else "a boolean (1 or 0)")
    return field == "1"


def parse_status(text: str, *, as_float: bool = False) -> int:
    """A status word: NR1, or with `as_float` a whole number in NR2/NR3 ('+8.000000E+00'), as
    instruments that put the status inside a reading of floats send it."""
    if not as_float:
        return parse_int(text)
    field = text.strip()
    if not _NRF.fullmatch(field):
        raise reply_error(text, "a status word (a whole number)")
    number = float(field)
    if not number.is_integer() or not 0 <= number < 2**32:
        raise reply_error(text, "a status word (a whole number from 0 to 2**32 - 1)")
    return int(number)


def split_reply(text: str) -> list[list[str]]:
    """Split a compound reply into message units (';') and their fields (',').

    Separators inside quoted strings (double or single quotes, doubled to escape) are kept, so an
    error entry like -113,"Undefined header;detail" stays one unit of two fields.
    """
    units: list[list[str]] = [[]]
    field: list[str] = []
    quote = ""
    for char in text.strip():
        if quote:
            quote = "" if char == quote else quote  # a doubled quote re-opens at the next char
            field.append(char)
        elif char in "\"'":
            quote = char
            field.append(char)
        elif char in ",;":
            units[-1].append("".join(field).strip())
            field = []
            if char == ";":
                units.append([])
        else:
            field.append(char)
    if quote:
        raise reply_error(text, "a reply with balanced quotes")
    units[-1].append("".join(field).strip())
    return units


def message_units(message: str) -> list[str]:
    """The commands of a compound program message, each from the root: 'SOUR:VOLT 1;:READ?' ->
    ['SOUR:VOLT 1', 'READ?'] (";" inside quoted strings kept). For reading a SCPI log by
    command; the relative-path form ('SOUR:VOLT 1;CURR 2') is not expanded."""
    units, unit, quote = [], [], ""
    for char in message.strip():
        if quote:
            quote = "" if char == quote else quote
        elif char in "\"'":
            quote = char
        elif char == ";":
            units.append("".join(unit).strip().removeprefix(":"))
            unit = []
            continue
        unit.append(char)
    units.append("".join(unit).strip().removeprefix(":"))
    return [u for u in units if u]


def flat_fields(text: str) -> list[str]:
    """All fields of a compound reply in order, units flattened ('1,2;3' -> ['1', '2', '3'])."""
    return [field for unit in split_reply(text) for field in unit]


def parse_error_entry(text: str, *, quoted: bool = True) -> tuple[int, str]:
    """(code, text) from one SYSTem:ERRor? entry: '-113,"Undefined header;detail"'; with
    `quoted` False the text may also come bare: '-113,Undefined header'."""
    match = _ERROR_ENTRY.fullmatch(text.strip())
    if match:
        return int(match.group(1)), match.group(2).replace('""', '"')
    bare = None if quoted else _BARE_ENTRY.fullmatch(text.strip())
    if not bare:
        raise reply_error(text, 'an error entry like -113,"Undefined header"')
    return int(bare.group(1)), bare.group(2).strip()


def block_dtype(datatype: str, big_endian: bool) -> np.dtype:
    """numpy dtype for a struct-style datatype letter ('f' float32, 'd' float64, 'h', 'i' ...)."""
    try:
        return np.dtype(("<", ">")[big_endian] + datatype)
    except TypeError as exc:
        raise ValueError(f"unknown block datatype {datatype!r}") from exc


def make_block(payload: bytes) -> bytes:
    """The IEEE 488.2 definite-length block for `payload` (no terminator): #<n><len><payload>."""
    length = str(len(payload)).encode()
    return b"#" + str(len(length)).encode() + length + payload


def parse_block_header(
    data: bytes, *, items: int | None = None, itemsize: int = 4
) -> tuple[int, int]:
    """(offset of the payload, payload length) of a block at the start of data.

    The indefinite form '#0' (IEEE 488.2 7.7.6: the payload runs to the terminator with END) has
    no length; on a socket its end cannot be found in the bytes, so it is taken only where the
    caller knows how many `items` of `itemsize` bytes it must hold (refused otherwise).
    """
    if data[:1] != b"#" or len(data) < 2 or not data[1:2].isdigit():
        raise reply_error(
            repr(data[:12]), "an IEEE 488.2 definite-length block (#<n><len>...) or #0 block"
        )
    digits = int(data[1:2])
    if digits == 0:
        if items is None:
            raise reply_error(repr(data[:12]), "a definite-length block (got indefinite '#0')")
        return 2, items * itemsize
    length_text = data[2 : 2 + digits]
    if len(length_text) != digits or not length_text.isdigit():
        raise reply_error(repr(data[: 2 + digits]), "a block header with a decimal length")
    return 2 + digits, int(length_text)


def decode_payload(payload: bytes, dtype: np.dtype) -> np.ndarray:
    """The array in a block payload; its length must be a whole number of items."""
    if len(payload) % dtype.itemsize:
        detail = f"a block of whole {dtype.itemsize}-byte items (got {len(payload)} bytes)"
        raise reply_error(f"<{len(payload)} bytes>", detail)
    return np.frombuffer(payload, dtype).copy()


def parse_block(
    data: bytes, *, datatype: str = "f", big_endian: bool = False, items: int | None = None
) -> np.ndarray:
    """The array in a complete block reply; an optional single trailing LF is allowed.

    The payload must be exactly as long as the header says (or, for '#0', as `items` values
    take): a short or long block means the reply and the stream are out of step, which must
    never pass as data.
    """
    dtype = block_dtype(datatype, big_endian)
    offset, length = parse_block_header(data, items=items, itemsize=dtype.itemsize)
    rest = data[offset:]
    rest = rest[:-1] if len(rest) == length + 1 and rest.endswith(b"\n") else rest
    if len(rest) != length:
        raise reply_error(f"<block of {len(rest)} bytes>", f"a block of {length} bytes")
    return decode_payload(rest, dtype)
