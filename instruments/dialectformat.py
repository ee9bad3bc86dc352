"""The dialect file formats, described once: every key of an SMU dialect and of a chamber dialect
with its type and meaning. From these models come the loaders' key and type checks
(instruments/dialect.py, instruments/chamber_dialect.py: `first_problem`), the JSON Schema
(`ccbench schema dialect`) and the reference page. What spans keys stays in the loaders:
placeholders, the list keys together, no reset per device, the reading's fields.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    StrictBool,
    StrictFloat,
    StrictInt,
    StrictStr,
    ValidationError,
)

Command = Annotated[StrictStr, Field(pattern=r"\S")]  # text with something in it
FIELD_NAMES = ("voltage", "current", "status", "errors", "ignore")
Terminator = Literal["LF", "CR", "CRLF"]


def key(meaning: str, *, optional: bool = False) -> object:
    """A dialect key; `optional` keys may be left out (they are then null), the others must be
    written, as null where the instrument has no such command."""
    return Field(None if optional else ..., description=meaning)


class SmuDialect(BaseModel):
    """An SMU dialect: the SCPI text of each abstract operation (null: the instrument has none).

    The operations the driver cannot do without are typed without null (output_query: every
    ending reads the output back as off)."""

    model_config = ConfigDict(extra="forbid", title="SMU dialect")

    name: Command = key("the dialect's name")
    description: Command | None = key("one line on which instruments it suits")
    identify: Command | None = key(
        "the identification query, e.g. *IDN? (null: the instrument answers none)"
    )
    reset: Command = key("the reset command (sent once, in setup order)")
    clear_status: Command | None = key("clears the status registers")
    operation_complete: Command | None = key("answers 1 when the pending operations are done")
    next_error: Command = key('reads the next error queue entry: code,"text"')
    source_voltage_mode: Command | None = key("puts the source in voltage mode")
    set_voltage: Command = key("sets the source level; placeholder {volts}")
    set_current_limit: Command = key("sets the current limit (compliance); placeholder {amps}")
    set_settle: Command | None = key("sets the delay before a measurement; {seconds}")
    set_aperture_nplc: Command | None = key("sets the aperture in power-line cycles; {nplc}")
    set_current_range: Command | None = key("sets a fixed current range; {amps}")
    set_current_range_auto: Command | None = key("switches the current range to auto")
    sense_functions: Command | None = key("chooses what a reading measures")
    output: Command = key("switches the output; placeholder {state} (ON or OFF)")
    output_query: Command = key("reads the output state back (1 or 0)")
    measure: Command = key("takes one reading")
    measure_fields: list[StrictStr] = key(
        f"the reading's fields in order ({', '.join(FIELD_NAMES)}); voltage and current once"
    )
    compliance_bit: Annotated[StrictInt, Field(ge=0, le=15)] | None = key(
        "the status bit set while the current limit is active (null: the clamp-fraction rule)"
    )
    select_channel: Command | None = key("connects one tray channel; placeholder {channel}")
    open_all_channels: Command | None = key("disconnects every channel")
    interlock_query: Command | None = key("reads the fixture interlock (1: closed)")
    list_voltage: Command | None = key(
        "loads a source list; placeholders {values} and {count}", optional=True
    )
    initiate: Command | None = key("starts the loaded list", optional=True)
    fetch: Command | None = key("reads the list's readings back", optional=True)
    fetch_fields: list[StrictStr] | None = key("the fields of each list reading", optional=True)
    binary_format: Command | None = key("switches readings to binary blocks", optional=True)
    binary_big_endian: StrictBool | None = key("the byte order binary_format selects",
                                               optional=True)  # fmt: skip
    ascii_format: Command | None = key("switches readings back to text", optional=True)
    fixed_mode: Command | None = key("fixes the source level during a list", optional=True)
    list_max_points: Annotated[StrictInt, Field(ge=1)] | None = key(
        "the most points one list may hold", optional=True
    )
    max_message_bytes: Annotated[StrictInt, Field(ge=1)] | None = key(
        "several commands may share one message up to this many bytes", optional=True
    )
    setup: list[Command] | None = key(
        "commands sent once after connecting (no placeholders)", optional=True
    )
    list_compliance_bit: Annotated[StrictInt, Field(ge=0, le=15)] | None = key(
        "the bit of a list reading's status that marks a clamp", optional=True
    )
    clamp_fraction: Annotated[StrictFloat | StrictInt, Field(ge=0.5, le=1)] | None = key(
        "without a status bit: clamped from this fraction of the limit up (default 0.98)",
        optional=True,
    )
    boolean_words: StrictBool | None = key("booleans may come as ON/OFF words", optional=True)
    error_text_quoted: StrictBool | None = key(
        "false: error entries may come without quotes", optional=True
    )
    status_as_float: StrictBool | None = key("status words may come as floats", optional=True)
    read_termination: Terminator | None = key(
        "how a reply ends: LF, CR or CRLF (null: LF, as IEEE 488.2 has it)", optional=True
    )
    write_termination: Terminator | None = key(
        "how a command is ended: LF, CR or CRLF (null: LF)", optional=True
    )
    binary_bits: Literal[32, 64] | None = key(
        "REAL,32 or REAL,64 binary blocks (null: 32); #0 blocks are read too", optional=True
    )
    initiate_wait: Command | None = key(
        "after initiate, for an overlapped instrument: *OPC? or *WAI", optional=True
    )
    list_clamp_event: Command | None = key(
        "read before and after each list: a clamp the readings did not show refuses the list",
        optional=True,
    )


class ChamberDialect(BaseModel):
    """A chamber dialect: the command text of each temperature operation (null: none)."""

    model_config = ConfigDict(extra="forbid", title="chamber dialect")

    name: Command = key("the dialect's name")
    description: Command | None = key("one line on which chambers it suits")
    identify: Command = key("the identification query")
    set_point: Command = key("sets the set point; placeholder {celsius}")
    set_point_query: Command = key("answers the set point in force")
    read_temperature: Command = key("reads the control (air) sensor")
    read_fixture: Command | None = key("reads a second sensor at the device mount")
    start: Command = key("starts controlling to the set point")
    stop: Command = key("stops controlling")
    running_query: Command | None = key("answers 1 while controlling")
    door_query: Command | None = key("answers 1 while the door is open")
    next_error: Command | None = key('reads the next error: code,"text"')
    valid_range_c: Annotated[list[StrictFloat | StrictInt], Field(min_length=2, max_length=2)] = (
        key("[lowest, highest] in degC: a reading outside is a sensor fault")
    )


@dataclass(frozen=True)
class Problem:
    """The first thing wrong with a dialect's keys or types, for the loader to put in words:
    kind "unknown" (a key the format lacks), "missing", "null" (a key that must have a
    value) or "value" (the wrong type or range)."""

    kind: str
    key: str
    value: Any = None


def first_problem(model: type[BaseModel], data: dict[Any, Any]) -> Problem | None:
    """What `model` refuses in `data`: an unknown key first (a misspelt key is named as such,
    not as the key it was meant to be, missing), then a missing key, then a value in the
    format's order of keys."""
    try:
        model.model_validate(data)
    except ValidationError as exc:
        errors = exc.errors()
        for kind, wanted in (("unknown", "extra_forbidden"), ("missing", "missing")):
            for error in errors:
                if error["type"] == wanted:
                    return Problem(kind, str(error["loc"][0]))
        key = str(errors[0]["loc"][0])
        value = data.get(key)
        return Problem("null" if value is None else "value", key, value)
    return None
