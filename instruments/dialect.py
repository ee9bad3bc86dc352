"""Dialects: the SCPI text of each abstract SMU operation, read from a small YAML file.

Adapting an instrument means writing a dialect file, not code. The loader checks every key, type
and placeholder once, so a wrong file fails at start-up with file, line and key, never mid-run.
"""

from __future__ import annotations

import difflib
import re
import string
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

import yaml

from instruments.errors import DialectError
from instruments.scpi import format_number

DIALECT_DIR = Path(__file__).resolve().parent / "dialects"

# Placeholders each text must contain, exactly (a set_voltage without {volts} would silently send
# a constant level: refused at load time).
PLACEHOLDERS: dict[str, frozenset[str]] = {
    "set_voltage": frozenset({"volts"}),
    "set_current_limit": frozenset({"amps"}),
    "set_settle": frozenset({"seconds"}),
    "set_aperture_nplc": frozenset({"nplc"}),
    "set_current_range": frozenset({"amps"}),
    "output": frozenset({"state"}),
    "select_channel": frozenset({"channel"}),
    "list_voltage": frozenset({"values", "count"}),
}
# Placeholders a text may use, any of them or none: a buffer read-out may name how many readings
# it wants and the indices of the first and last (1-based), as instruments that read a buffer by
# index need ("TRAC:DATA? {first},{last}").
OPTIONAL_PLACEHOLDERS: dict[str, frozenset[str]] = {
    "fetch": frozenset({"count", "first", "last"}),
}
# Keys sent for one device that may also name its `{channel}`: on a mainframe of several source
# channels, each tray channel is one of them, addressed in every command (a numeric suffix,
# "OUTP{channel} ON", or a channel list, "OUTP ON,(@{channel})") instead of being switched.
CHANNEL_KEYS = frozenset(
    {"source_voltage_mode", "set_voltage", "set_current_limit", "set_settle"}
    | {"set_aperture_nplc", "set_current_range", "set_current_range_auto", "sense_functions"}
    | {"output", "output_query", "measure", "list_voltage", "initiate", "initiate_wait"}
    | {"fetch", "binary_format", "ascii_format", "fixed_mode"}
)
# Where one of them names a channel, these must all do: an output switched on one channel must
# never be set, measured or read back on another.
CHANNEL_CORE = ("set_voltage", "set_current_limit", "output", "output_query", "measure")
MEASURE_FIELD_NAMES = frozenset({"voltage", "current", "status", "errors", "ignore"})
FETCH_FIELD_NAMES = frozenset({"voltage", "current", "status", "ignore"})
# Keys added for source lists, the reading buffer and binary blocks: a dialect file written
# before them may leave them out (they are then null: the driver sweeps point by point).
OPTIONAL_KEYS = frozenset(
    {"list_voltage", "initiate", "fetch", "fetch_fields", "binary_format", "binary_big_endian"}
    | {"ascii_format", "fixed_mode", "list_max_points", "max_message_bytes"}
    | {"setup", "list_compliance_bit", "clamp_fraction"}
    | {"boolean_words", "error_text_quoted", "status_as_float"}
    | {"read_termination", "write_termination", "binary_bits", "initiate_wait"}
    | {"list_clamp_event"}
)
TERMINATOR_NAMES = ("LF", "CR", "CRLF")
# Without a status bit, a reading counts as clamped from this fraction of the programmed limit
# up. A real source clamps within its limit accuracy, a few tenths of a percent (plus an offset)
# below the limit as often as above it; 2 % below covers that with room (common practice, no
# source). A dialect may set its own `clamp_fraction` from the instrument's limit accuracy.
DEFAULT_CLAMP_FRACTION = 0.98
# Keys sent at every device or segment: a reset inside one of them would switch the output off
# (and drop the limit) in the middle of a device, so the loader refuses it: `setup` is the place.
_ONCE_ONLY_KEYS = frozenset({"reset", "setup", "identify", "operation_complete", "next_error"})
_LIST_KEYS = ("list_voltage", "initiate", "fetch", "fetch_fields")  # all given, or none


@dataclass(frozen=True)
class Dialect:
    """One instrument's SCPI text per operation; None where the instrument has no such command."""

    name: str
    description: str | None
    # The identification query, asked once after connecting and used (its answer constant) to
    # resynchronise the link; None: the instrument answers no such query, nothing is asked.
    identify: str | None
    reset: str
    clear_status: str | None
    operation_complete: str | None
    next_error: str
    source_voltage_mode: str | None
    set_voltage: str
    set_current_limit: str
    set_settle: str | None
    set_aperture_nplc: str | None
    set_current_range: str | None
    set_current_range_auto: str | None
    sense_functions: str | None
    output: str
    output_query: str | None
    measure: str
    measure_fields: tuple[str, ...]
    compliance_bit: int | None
    select_channel: str | None
    open_all_channels: str | None
    interlock_query: str | None
    # source lists and the reading buffer (all None: the instrument has none)
    list_voltage: str | None = None
    initiate: str | None = None
    fetch: str | None = None
    fetch_fields: tuple[str, ...] | None = None
    binary_format: str | None = None
    binary_big_endian: bool | None = None
    ascii_format: str | None = None
    fixed_mode: str | None = None
    list_max_points: int | None = None
    # Several commands may share one message (IEEE 488.2 program message units joined by ";"),
    # up to this many bytes; None: every command is a message of its own.
    max_message_bytes: int | None = None
    # Commands sent once after connecting, before the output is read back as off (reset, clear
    # status, terminals, sense mode, autozero); None: nothing beyond the output off.
    setup: tuple[str, ...] | None = None
    # Bit of the list status word (fetch field `status`) set for a clamped list reading; it may
    # differ from `compliance_bit`, the bit of a single reading's status.
    list_compliance_bit: int | None = None
    # Without a status bit: clamped from this fraction of the limit up (DEFAULT_CLAMP_FRACTION).
    clamp_fraction: float | None = None
    # Reply styles: booleans answered as ON/OFF words too; error entries whose text may come
    # without quotes; status words sent as floats (+8.000000E+00). None: the SCPI form only.
    boolean_words: bool | None = None
    error_text_quoted: bool | None = None
    status_as_float: bool | None = None
    # Line terminators of program messages (write) and of replies (read): LF, CR or CRLF;
    # None: LF, as IEEE 488.2 has it.
    read_termination: str | None = None
    write_termination: str | None = None
    # REAL,32 or REAL,64 in binary blocks (None: 32).
    binary_bits: int | None = None
    # Sent after `initiate` on an overlapped instrument (one that reads further commands while
    # it works through a list): a query such as *OPC? whose answer 1 comes when it is done, or
    # a command such as *WAI that holds later commands until then. None: not needed.
    initiate_wait: str | None = None
    # Where list readings are told clamped by the clamp-fraction rule: a query of the status
    # event register whose `compliance_bit` latches while the limit is active (SCPI-1999
    # STAT:QUES:EVEN?, cleared by reading). Read before and after each list: set after it with
    # no reading counted as clamped, the list is refused (a clamp below the fraction would
    # otherwise be stored as data). None: no such check.
    list_clamp_event: str | None = None
    source: str = "<built in>"
    key_lines: tuple[tuple[str, int], ...] = ()  # where each key stands in the file

    @property
    def has_lists(self) -> bool:
        return self.list_voltage is not None

    @property
    def fraction(self) -> float:
        """The clamp fraction in use where no status bit tells a clamp."""
        return DEFAULT_CLAMP_FRACTION if self.clamp_fraction is None else self.clamp_fraction

    def line_of(self, key: str) -> int | None:
        return dict(self.key_lines).get(key)

    @property
    def addresses_channels(self) -> bool:
        """Whether every command names its channel (a mainframe of source channels)."""
        return "{channel}" in self.set_voltage

    def channels_problem(self, channels: tuple[int, ...]) -> DialectError | None:
        """Why this dialect cannot reach `channels` (None when it can): without a switch
        command only channel 1, the device on the terminals themselves, can be measured."""
        if self.select_channel is not None or self.addresses_channels:
            return None
        if all(c == 1 for c in channels):
            return None
        detail = f"is null, but the station uses channels {list(channels)}: give the switch "
        detail += "command with {channel}, or use channel 1 alone (no switch matrix)"
        return DialectError(self.source, "select_channel", self.line_of("select_channel"), detail)

    def compliance_rules(self) -> dict[str, str]:
        """How a clamped reading is told, for single and for list readings, in words."""
        rule = f"clamp fraction: |I| >= {self.fraction:g} x the current limit"
        single = self.compliance_bit
        lists = self.list_compliance_bit
        return {
            "single": rule if single is None else f"status bit {single} of the reading",
            "list": rule if lists is None else f"status bit {lists} of the list reading",
        }

    @property
    def terminators(self) -> tuple[str, str]:
        """(read, write) line terminators by name: LF unless the dialect says otherwise."""
        return self.read_termination or "LF", self.write_termination or "LF"

    @property
    def block_datatype(self) -> str:
        """The struct letter of a binary block's values: 'f' (REAL,32) or 'd' (REAL,64)."""
        return "d" if self.binary_bits == 64 else "f"

    def render(self, key: str, **values: object) -> str:
        """The SCPI text of `key` with its placeholders filled (floats as NR3, ints as NR1)."""
        template = self.template(key)
        wanted = PLACEHOLDERS.get(key, OPTIONAL_PLACEHOLDERS.get(key, frozenset()))
        if key in CHANNEL_KEYS and "{channel}" in template:
            wanted = wanted | {"channel"}
        if set(values) != wanted:
            detail = f"needs values for {sorted(wanted)}, was given {sorted(values)}"
            raise DialectError(self.source, key, None, detail, hint="this is a driver bug")
        return template.format(**{name: _scpi_text(v) for name, v in values.items()})

    def template(self, key: str) -> str:
        """The raw text of `key`; a DialectError when the dialect leaves it null."""
        if key not in _TEXT_KEYS:
            raise DialectError(self.source, key, None, "is not a dialect operation")
        text: str | None = getattr(self, key)
        if text is None:
            detail = "is null: this instrument cannot do that operation"
            raise DialectError(self.source, key, None, detail, hint="give the key a SCPI text")
        return text


_ALL_KEYS = tuple(f.name for f in fields(Dialect) if f.name not in ("source", "key_lines"))
_NON_TEXT = frozenset(
    {"name", "description", "measure_fields", "compliance_bit", "fetch_fields"}
    | {"binary_big_endian", "list_max_points", "max_message_bytes"}
    | {"setup", "list_compliance_bit", "clamp_fraction"}
    | {"boolean_words", "error_text_quoted", "status_as_float"}
    | {"read_termination", "write_termination", "binary_bits"}
)
_TEXT_KEYS = frozenset(_ALL_KEYS) - _NON_TEXT


def _scpi_text(value: object) -> str:
    if isinstance(value, bool):
        raise TypeError("pass ON/OFF as text, not a bool")
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return format_number(value)
    if isinstance(value, str):
        return value
    raise TypeError(f"cannot put {type(value).__name__} into SCPI text")


def load_dialect(name_or_path: str | Path) -> Dialect:
    """The packaged dialect of that name ('scpi1999'), or the dialect file at that path."""
    path = _resolve(name_or_path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise DialectError(path, None, None, f"cannot read: {exc.strerror or exc}") from exc
    return parse_dialect(text, path)


def _resolve(name_or_path: str | Path) -> Path:
    packaged = DIALECT_DIR / f"{name_or_path}.yaml"
    is_name = isinstance(name_or_path, str) and name_or_path.isidentifier()
    return packaged if is_name and packaged.exists() else Path(name_or_path)


def parse_dialect(text: str, source: str | Path = "<text>") -> Dialect:
    """Validate dialect YAML text and build the Dialect; errors name `source`, key and line."""
    lines = _key_lines(text, source)
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise DialectError(source, None, _yaml_line(exc), f"not valid YAML: {exc}") from exc
    if not isinstance(data, dict):
        raise DialectError(source, None, 1, "must be a mapping of keys to SCPI text")
    _check_keys(data, lines, source)
    values = {key: _check_value(key, data.get(key), lines.get(key), source) for key in _ALL_KEYS}
    _check_measure(values, lines, source)
    _check_lists(values, lines, source)
    _check_no_reset_per_device(values, lines, source)
    _check_channel_addressing(values, lines, source)
    return Dialect(**values, source=str(source), key_lines=tuple(lines.items()))


def read_mapping(text: str, source: str | Path) -> tuple[dict[Any, Any], dict[str, int]]:
    """A dialect file's top mapping and the line of each key (the one YAML reader of instruments/:
    other dialect formats, such as a chamber's, check their own keys from this)."""
    lines = _key_lines(text, source)
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise DialectError(source, None, _yaml_line(exc), f"not valid YAML: {exc}") from exc
    if not isinstance(data, dict):
        raise DialectError(source, None, 1, "must be a mapping of keys to command text")
    return data, lines


def _key_lines(text: str, source: str | Path) -> dict[str, int]:
    try:
        node = yaml.compose(text)
    except yaml.YAMLError as exc:
        raise DialectError(source, None, _yaml_line(exc), f"not valid YAML: {exc}") from exc
    if not isinstance(node, yaml.MappingNode):
        return {}
    for key, value in node.value:
        _check_whole_number(str(key.value), value, source)
    return {str(k.value): k.start_mark.line + 1 for k, _ in node.value}


# YAML 1.1 reads '017' as 15 (octal), '0x10' as 16, '1_0' as 10 and '1:30' as 90; a dialect's
# whole numbers (a bit number, a buffer size) must be plain decimal, as written.
_DECIMAL = re.compile(r"0|[1-9][0-9]*")


def _check_whole_number(key: str, node: yaml.Node, source: str | Path) -> None:
    if node.tag == "tag:yaml.org,2002:int" and not _DECIMAL.fullmatch(str(node.value)):
        detail = f"must be a plain decimal whole number (got {node.value!r}, which YAML reads "
        detail += "in another base or with separators)"
        raise DialectError(source, key, node.start_mark.line + 1, detail)


def _yaml_line(exc: yaml.YAMLError) -> int | None:
    mark = getattr(exc, "problem_mark", None)
    return mark.line + 1 if mark is not None else None


def _check_keys(data: dict[Any, Any], lines: dict[str, int], source: str | Path) -> None:
    """Keys and types, as the dialect format (instruments.dialectformat) describes them."""
    # Start-up speed: the format builds a pydantic model at import; only loading a file needs it.
    from instruments.dialectformat import SmuDialect, first_problem

    problem = first_problem(SmuDialect, data)
    if problem is not None:
        raise format_error(problem, _ALL_KEYS, lines, source, VALUE_WORDS)


# What a key of the wrong type or range must be ({value!r}: what was written).
VALUE_WORDS = {
    "measure_fields": "must be a list of field names",
    "fetch_fields": "must be a list of field names",
    "setup": "must be a list of SCPI commands (text)",
    "clamp_fraction": "must be a number from 0.5 to 1 (got {value!r}): the fraction of the "
    "current limit from which a reading counts as clamped",
    **dict.fromkeys(
        ("binary_big_endian", "boolean_words", "error_text_quoted", "status_as_float"),
        "must be true or false (got {value!r})",
    ),
    **dict.fromkeys(
        ("list_max_points", "max_message_bytes"), "must be a whole number >= 1 (got {value!r})"
    ),
    **dict.fromkeys(
        ("compliance_bit", "list_compliance_bit"), "must be a bit number 0..15 (got {value!r})"
    ),
    **dict.fromkeys(
        ("read_termination", "write_termination"),
        f"must be one of {', '.join(TERMINATOR_NAMES)} (got {{value!r}})",
    ),
    "binary_bits": "must be 32 or 64 (got {value!r})",
}


def format_error(
    problem: Any,
    known: tuple[str, ...],
    lines: dict[str, int],
    source: str | Path,
    words: dict[str, str],
    hint: str | None = None,
) -> DialectError:
    """A dialectformat.Problem as the one-line DialectError of its key and line."""
    key, line = problem.key, lines.get(problem.key)
    if problem.kind == "unknown":
        near = difflib.get_close_matches(key, known, n=1, cutoff=0.75)
        detail = (
            f"unknown key; did you mean {near[0]!r}?"
            if near
            else (f"unknown key (known keys: {', '.join(known)})")
        )
    elif problem.kind == "missing":
        line = max(lines.values(), default=None)
        detail = "missing (write null if not supported)"
    elif problem.kind == "null":
        detail = "must not be null: the driver needs it"
    else:
        detail = words.get(key, "must be text (got {value!r})").format(value=problem.value)
    return DialectError(source, key, line, detail, hint=hint)


def _check_value(key: str, value: Any, line: int | None, source: str | Path) -> Any:
    """A value the format has checked, in the form the driver takes (tuples, floats), with the
    placeholders of its text checked."""
    if value is None:
        return None
    if key in ("measure_fields", "fetch_fields"):
        return tuple(value)
    if key == "setup":
        return _check_setup(value, line, source)
    if key in ("read_termination", "write_termination"):
        if value not in TERMINATOR_NAMES:
            detail = f"must be one of {', '.join(TERMINATOR_NAMES)} (got {value!r})"
            raise DialectError(source, key, line, detail)
        return value
    if key == "binary_bits":
        if isinstance(value, bool) or value not in (32, 64):
            raise DialectError(source, key, line, f"must be 32 or 64 (got {value!r})")
        return value
    if key == "clamp_fraction":
        return float(value)
    if key in _TEXT_KEYS:
        check_placeholders(key, value, line, source)
    return value


def _check_setup(value: Any, line: int | None, source: str | Path) -> tuple[str, ...]:
    for command in value:
        if "{" in command or "}" in command:
            raise DialectError(source, "setup", line, f"takes no placeholders (got {command!r})")
    return tuple(value)


def _units(text: str) -> list[str]:
    """The program message units of a compound message, without the leading colons."""
    return [unit.strip().lstrip(":").strip().upper() for unit in text.split(";")]


def _check_no_reset_per_device(
    values: dict[str, Any], lines: dict[str, int], source: str | Path
) -> None:
    resets = {"*RST", *_units(values["reset"])}
    for key in sorted(_TEXT_KEYS - _ONCE_ONLY_KEYS):
        text = values[key]
        if text is not None and resets & set(_units(text)):
            detail = f"resets the instrument ({text!r}): sent at every device, it would switch "
            detail += "the output off mid-device; put the reset in `setup` (sent once)"
            raise DialectError(source, key, lines.get(key), detail)


def check_placeholders(
    key: str,
    text: str,
    line: int | None,
    source: str | Path,
    placeholders: dict[str, frozenset[str]] = PLACEHOLDERS,
    optional: dict[str, frozenset[str]] = OPTIONAL_PLACEHOLDERS,
) -> None:
    """The braces of a command text name exactly the placeholders its key is filled with (or,
    for a key of `optional`, some of them)."""
    try:
        found = {name for _, name, _, _ in string.Formatter().parse(text) if name is not None}
    except ValueError as exc:
        raise DialectError(source, key, line, f"bad braces in {text!r}: {exc}") from exc
    if key in CHANNEL_KEYS and placeholders is PLACEHOLDERS:
        found = found - {"channel"}  # a mainframe's commands name their channel (checked apart)
    if key in optional:
        if not found <= optional[key]:
            allowed = ", ".join(f"{{{n}}}" for n in sorted(optional[key]))
            raise DialectError(source, key, line, f"may contain only {allowed} (got {text!r})")
        return
    wanted = placeholders.get(key, frozenset())
    if found != wanted:
        expected = ", ".join(f"{{{n}}}" for n in sorted(wanted)) or "no placeholder"
        raise DialectError(source, key, line, f"must contain {expected} (got {text!r})")


def _check_channel_addressing(
    values: dict[str, Any], lines: dict[str, int], source: str | Path
) -> None:
    """All of CHANNEL_CORE name {channel}, or none of CHANNEL_KEYS does."""
    naming = [k for k in sorted(CHANNEL_KEYS) if "{channel}" in (values[k] or "")]
    if not naming:
        return
    for key in CHANNEL_CORE:
        if "{channel}" not in values[key]:
            detail = f"must name {{channel}} too, as {naming[0]} does: on a mainframe an output "
            detail += "switched on one channel must never be set or read back on another"
            raise DialectError(source, key, lines.get(key), detail)


def _check_lists(values: dict[str, Any], lines: dict[str, int], source: str | Path) -> None:
    given = [key for key in _LIST_KEYS if values[key] is not None]
    if given and len(given) != len(_LIST_KEYS):
        missing = [key for key in _LIST_KEYS if values[key] is None]
        detail = f"needs {', '.join(missing)} too (a list is loaded, started and fetched)"
        raise DialectError(source, given[0], lines.get(given[0]), detail)
    names = values["fetch_fields"]
    if names is not None:
        _check_field_names("fetch_fields", names, FETCH_FIELD_NAMES, lines, source)
    _check_list_status(values, lines, source)
    if values["binary_format"] is not None and values["binary_big_endian"] is None:
        detail = "binary_big_endian must say the byte order that binary_format selects"
        raise DialectError(source, "binary_format", lines.get("binary_format"), detail)
    if values["binary_bits"] is not None and values["binary_format"] is None:
        detail = "is set but binary_format is null: give the command that selects REAL blocks"
        raise DialectError(source, "binary_bits", lines.get("binary_bits"), detail)
    if values["list_clamp_event"] is not None and values["compliance_bit"] is None:
        detail = "needs compliance_bit: the bit of the event register that latches a clamp"
        raise DialectError(source, "list_clamp_event", lines.get("list_clamp_event"), detail)
    if values["initiate_wait"] is not None and values["initiate"] is None:
        detail = "is set but the dialect has no lists (initiate is null)"
        raise DialectError(source, "initiate_wait", lines.get("initiate_wait"), detail)


def _check_list_status(values: dict[str, Any], lines: dict[str, int], source: str | Path) -> None:
    """A list status word is read with its own bit, never assumed to match a single reading's."""
    has_status = "status" in (values["fetch_fields"] or ())
    bit = values["list_compliance_bit"]
    if has_status and bit is None:
        detail = "fetch_fields has 'status': say which bit of it marks a clamped list reading "
        detail += "in list_compliance_bit (it may differ from compliance_bit), or drop 'status'"
        raise DialectError(source, "fetch_fields", lines.get("fetch_fields"), detail)
    if bit is not None and not has_status:
        detail = "list_compliance_bit is set but fetch_fields has no 'status' field"
        raise DialectError(source, "list_compliance_bit", lines.get("list_compliance_bit"), detail)


def _check_field_names(
    key: str,
    names: tuple[str, ...],
    known: frozenset[str],
    lines: dict[str, int],
    source: str | Path,
) -> None:
    line = lines.get(key)
    unknown = set(names) - known
    if unknown:
        detail = f"unknown {sorted(unknown)} ({', '.join(sorted(known))})"
        raise DialectError(source, key, line, detail)
    for name in ("voltage", "current"):
        if names.count(name) != 1:
            raise DialectError(source, key, line, f"needs {name!r} exactly once")
    if names.count("status") > 1:
        raise DialectError(source, key, line, "has 'status' more than once")


def _check_measure(values: dict[str, Any], lines: dict[str, int], source: str | Path) -> None:
    names = values["measure_fields"]
    line = lines.get("measure_fields")
    unknown = set(names) - MEASURE_FIELD_NAMES
    if unknown:
        known = ", ".join(sorted(MEASURE_FIELD_NAMES))
        raise DialectError(source, "measure_fields", line, f"unknown {sorted(unknown)} ({known})")
    for name in ("voltage", "current"):
        if names.count(name) != 1:
            raise DialectError(source, "measure_fields", line, f"needs {name!r} exactly once")
    for name in ("status", "errors"):
        if names.count(name) > 1:
            raise DialectError(source, "measure_fields", line, f"has {name!r} more than once")
    if values["compliance_bit"] is not None and "status" not in names:
        detail = "compliance_bit is set but measure_fields has no 'status' field"
        raise DialectError(source, "compliance_bit", lines.get("compliance_bit"), detail)
