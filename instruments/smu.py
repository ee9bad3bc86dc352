"""The abstract SMU operations the sequencer needs, spoken in whatever dialect the instrument has.

The driver formats SCPI only through `Dialect.render` and parses replies only through
`instruments.scpi`; it never sees a socket. SCPI error-queue entries become exceptions in exactly
one place, `ScpiSmu.check_errors`.
"""

from __future__ import annotations

import logging
import math
import numbers
import time
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from typing import TypeVar

import numpy as np

from instruments.dialect import Dialect
from instruments.errors import InstrumentError, ReplyError, ScpiError, in_part
from instruments.protocol import Transport
from instruments.scpi import (
    flat_fields,
    format_number,
    parse_bool,
    parse_error_entry,
    parse_int,
    parse_number,
    parse_status,
    special_values,
)

log = logging.getLogger(__name__)
T = TypeVar("T")

MAX_ERROR_READS = 20  # a queue holds about 10 entries; more reads means it never empties
_RECENT = 8  # commands kept to say, in an error message, what the instrument was sent
# A list run's reply takes as long as the run: the timeout grows by this much per point beyond
# the settling and the aperture (the slowest line frequency, 50 Hz, is assumed for the aperture).
_LIST_MARGIN_S = 0.01
_SLOWEST_LINE_HZ = 50.0
Sweep = tuple[np.ndarray, np.ndarray, np.ndarray]  # voltage, current, in_compliance
NOT_IDENTIFIED = "not identified (the dialect's identify is null)"


@dataclass(frozen=True)
class Reading:
    """One measurement at the terminals: SI units, inf/nan where the instrument sent SCPI's
    special values; `in_compliance` means the current limit was clamping (not a valid point)."""

    voltage_v: float
    current_a: float
    in_compliance: bool


class ScpiSmu:
    """A source-measure unit sourcing voltage with a current limit, behind a `Transport`."""

    def __init__(
        self,
        transport: Transport,
        dialect: Dialect,
        *,
        sleep: Callable[[float], None] = time.sleep,
    ) -> None:
        self.transport = transport
        self.dialect = dialect
        self._sleep = sleep
        self._identity: str | None = None
        self._limit_a: float | None = None
        self._settle_s = 0.0  # waited by the driver itself only when the dialect has no settle
        self._recent: deque[str] = deque(maxlen=_RECENT)
        self._pending: list[str] = []  # commands held for the next message (see `batch`)
        self._batching = False
        # A reply could not be parsed: the rest of it may still be on its way, so the input is
        # flushed before the next query (never read as the answer to it, e.g. the output state).
        self._unread = False
        # What the error queue held before this session sent anything (see `start_up`).
        self.stale_errors: list[tuple[int, str]] = []
        # A mainframe (the dialect names {channel} in its commands): the channel addressed now,
        # and every one addressed in this session, each switched off by `safe_state`.
        self.channel = 1
        self.channels_used: set[int] = {1}
        self._fetched = "the reply"  # the last fetch's reply, quoted in part, for errors

    @property
    def resource(self) -> str:
        return self.transport.resource

    @property
    def identity(self) -> str:
        """The instrument's identification (asked once, then cached)."""
        return self._identity if self._identity is not None else self.identify()

    def identify(self) -> str:
        """The answer to the dialect's identification query; where the dialect has none, a
        text saying so (nothing is sent)."""
        if self.dialect.identify is None:
            self._identity = NOT_IDENTIFIED
            return self._identity
        self._identity = self._query("identify").strip()
        return self._identity

    def reset(self) -> None:
        """Reset to the instrument's defaults, clear status and the error queue, wait until done."""
        self._write("reset")
        if self.dialect.clear_status is not None:
            self._write("clear_status")
        if self.dialect.operation_complete is not None:
            self._parse("operation_complete", self._query("operation_complete"), parse_int)
        self._limit_a = None

    def start_up(self) -> list[tuple[int, str]]:
        """Once after connecting: empty the error queue of what was there before (returned and
        kept in `stale_errors`, never raised: a power-on error is not this session's), send the
        dialect's `setup` commands, then check those were accepted (ScpiError naming them)."""
        self._flush_quietly()
        self.stale_errors = self._drain_errors()[0]
        self._recent.clear()  # a stale entry must not be blamed on what was sent before it
        for command in self.dialect.setup or ():
            self._recent.append(command)
            self.transport.write(command)
        if self.dialect.operation_complete is not None and self.dialect.setup:
            self._parse("operation_complete", self._query("operation_complete"), parse_int)
        self.check_errors()
        self._limit_a = None  # a reset in the setup drops the limit, too
        return self.stale_errors

    def all_off(self) -> None:
        """Output off, then level 0 V, on every channel used (one, unless a mainframe); raises
        on the first failure, as a start must."""
        for _ in self._every_channel():
            self.output(False)
            self.set_voltage(0.0)

    def safe_state(self) -> bool:
        """Output off, then level 0 V. Never raises (it runs in `finally` blocks).

        Each step is tried even if the one before failed; both are plain writes, so they need no
        reply and work while a query is out of step. Problems are logged as warnings, and the
        return value says whether both commands were sent (False: assume the output may be on).
        """
        sent = True
        steps = (
            ("output off", lambda: self.output(False)),
            ("level 0 V", lambda: self.set_voltage(0.0)),
        )
        for _ in self._every_channel():
            for name, step in steps:
                try:
                    step()
                except Exception as exc:  # any failure here must not hide the one being handled
                    log.warning("safe state: %s failed on %s: %s", name, self.resource, exc)
                    sent = False
        return sent

    def _every_channel(self) -> Iterator[int]:
        """Each channel used in turn (a mainframe), the current one last; or just the one."""
        if not self.dialect.addresses_channels:
            yield self.channel
            return
        current = self.channel
        for channel in [*sorted(self.channels_used - {current}), current]:
            self.channel = channel
            yield channel
        self.channel = current

    def configure(
        self,
        *,
        limit_a: float,
        nplc: float,
        settle_s: float,
        current_range_a: float | None = None,
    ) -> None:
        """Source voltage with a current limit; set aperture, settling and range, then check."""
        _check_positive(limit_a=limit_a, nplc=nplc)
        if current_range_a is not None:
            _check_positive(current_range_a=current_range_a)
        if not (math.isfinite(settle_s) and settle_s >= 0):
            raise ValueError(f"settle_s must be >= 0 s (got {settle_s!r})")
        with self.batch():  # the whole setup and its error check: one exchange
            self._write_if_known("source_voltage_mode")
            self.set_current_limit(limit_a)
            self._configure_timing(nplc, settle_s)
            self._configure_range(current_range_a)
            self._write_if_known("sense_functions")
            self.check_errors()

    @contextmanager
    def batch(self) -> Iterator[None]:
        """Inside, commands are held and go out with the next query as one message (the setup
        of a device with its error check, a level with its reading), or together at the end.

        Only where the dialect allows compound messages (`max_message_bytes`); otherwise, and
        when nested, it changes nothing. The order of commands is kept, and so is their effect:
        on an exception the held commands are still sent (each had passed every check before
        it was held, exactly as if it had gone out at once), and switching the output off
        never waits (`output`).
        """
        if self._batching or self.dialect.max_message_bytes is None:
            yield
            return
        self._batching = True
        try:
            yield
        except BaseException:
            self._flush_quietly()
            raise
        finally:
            self._batching = False
        self._flush()

    def set_voltage(self, volts: float) -> None:
        self._write("set_voltage", volts=float(volts))

    def set_current_limit(self, amps: float) -> None:
        self._write("set_current_limit", amps=float(amps))
        self._limit_a = float(amps)

    def output(self, on: bool) -> None:
        if on:
            self._write("output", state="ON")
            return
        # Off goes out now, as a message of its own, after whatever was held before it.
        self._flush_quietly()
        message = self.dialect.render("output", state="OFF", **self.address("output"))
        self._recent.append(message)
        self.transport.write(message)

    def output_is_on(self) -> bool:
        """The output read back (on a mainframe: whether any channel used reads on)."""
        states = [
            self._parse("output_query", self._query("output_query"), self._bool)
            for _ in self._every_channel()
        ]
        return any(states)

    def measure(self) -> Reading:
        """One reading with one query; compliance from the status bit the dialect names.

        When the reply also carries the error-queue count (field `errors`), a non-zero count
        drains the queue and raises ScpiError instead of returning the reading: a level the
        instrument refused, or an event such as an interlock trip, is caught at the next point.
        """
        if self._settle_s:
            self._flush()  # the wait starts once the level has gone out
            self._sleep(self._settle_s)
        reply = self._query("measure")
        fields = flat_fields(reply)
        names = self.dialect.measure_fields
        if len(fields) != len(names):
            self._unread = True
            shape = f"has {len(fields)} fields, the dialect expects {list(names)}"
            detail = f"reply {in_part(reply)} {shape}"
            raise ReplyError(self.resource, self.dialect.measure, detail)
        values = dict(zip(names, fields, strict=True))
        if "errors" in values and self._parse("measure", values["errors"], parse_int):
            self.check_errors()  # a refused level or an instrument event: this point is not data
        voltage = self._parse("measure", values["voltage"], parse_number)
        current = self._parse("measure", values["current"], parse_number)
        return Reading(voltage, current, self._in_compliance(values, current))

    def can_run_list(self, settle_s: float) -> bool:
        """Whether `list_sweep` runs on the instrument (else it goes point by point)."""
        return self.dialect.has_lists and not (settle_s and self.dialect.set_settle is None)

    def list_sweep(
        self,
        levels_v: Sequence[float],
        *,
        limit_a: float,
        nplc: float,
        settle_s: float,
        configure: bool = True,
    ) -> Sweep:
        """Apply `levels_v` in order, each settled `settle_s` and measured over `nplc`, and
        return (voltage, current, in_compliance) arrays, one entry per level.

        The output must be on, as for `measure()`; the source is left at the last level. With
        a list-capable dialect the instrument runs the whole list and the readings come back
        in one fetch (one binary block where the dialect offers it, else ASCII), in chunks of
        `list_max_points`; otherwise, and when the dialect cannot settle, point by point.
        `configure=False` skips the configuration when the caller has just sent the same one.
        """
        levels = np.asarray(levels_v, dtype=float)
        if levels.ndim != 1 or not levels.size or not np.all(np.isfinite(levels)):
            raise ValueError(f"levels_v must be a non-empty list of finite volts ({levels_v!r})")
        if configure:
            self.configure(limit_a=limit_a, nplc=nplc, settle_s=settle_s)
        if not self.can_run_list(settle_s):
            return self._point_by_point(levels)
        size = self.dialect.list_max_points or levels.size
        chunks = [levels[k : k + size] for k in range(0, levels.size, size)]
        parts = [self._run_list(chunk, nplc, settle_s) for chunk in chunks]
        voltage, current, limited = (np.concatenate(column) for column in zip(*parts, strict=True))
        return voltage, current, limited

    def select_channel(self, channel: int) -> None:
        """Connect tray channel `channel` (1..N) alone to the SMU, then check it was accepted:
        a refused switch would otherwise measure the wrong device."""
        if isinstance(channel, bool) or not isinstance(channel, numbers.Integral) or channel < 1:
            raise ValueError(f"channel must be an integer >= 1 (got {channel!r})")
        problem = self.dialect.channels_problem((int(channel),))
        if problem is not None:
            raise problem
        if self.dialect.addresses_channels and channel != self.channel:
            self.output(False)  # the channel left behind is switched off before moving on
            self.channel = int(channel)
            self.channels_used.add(self.channel)
        if self.dialect.select_channel is None:
            return  # no switch matrix: channel 1 is the device on the terminals
        with self.batch():
            self._write("select_channel", channel=int(channel))
            self.check_errors()

    def open_all_channels(self) -> None:
        """Disconnect every tray channel (nothing to do when the dialect has no switch matrix)."""
        self._write_if_known("open_all_channels")

    def interlock_closed(self) -> bool:
        """True when the fixture lid is closed. A dialect without `interlock_query` raises
        DialectError: an interlock that cannot be read must never count as closed."""
        return self._parse("interlock_query", self._query("interlock_query"), self._bool)

    def check_errors(self) -> None:
        """Drain the error queue; raise ScpiError for its first entry, all of them listed."""
        entries, hint = self._drain_errors()
        sent = " ; ".join(self._recent) or None  # what was sent since the last check
        self._recent.clear()
        if entries:
            code, text = entries[0]
            raise ScpiError(self.resource, sent, code, text, entries=entries, hint=hint)

    def close(self) -> None:
        self.transport.close()

    # -- internals -------------------------------------------------------------------------

    def _drain_errors(self) -> tuple[list[tuple[int, str]], str | None]:
        """Every entry of the error queue, read until "no error"; a hint if it never empties."""
        entries: list[tuple[int, str]] = []
        for _ in range(MAX_ERROR_READS):
            entry = self._parse("next_error", self._query("next_error"), self._error_entry)
            if entry[0] == 0:
                return entries, None
            entries.append(entry)
        return entries, f"the error queue was not empty after {MAX_ERROR_READS} reads: reset it"

    def _point_by_point(self, levels: np.ndarray) -> Sweep:
        readings = []
        for volts in levels:
            self.set_voltage(float(volts))
            readings.append(self.measure())
        return (
            np.array([r.voltage_v for r in readings]),
            np.array([r.current_a for r in readings]),
            np.array([r.in_compliance for r in readings], dtype=bool),
        )

    def _run_list(self, levels: np.ndarray, nplc: float, settle_s: float) -> Sweep:
        values = ",".join(format_number(float(v)) for v in levels)
        binary = self.dialect.binary_format is not None
        self._clamp_events()  # read now, so that what is set afterwards is this list's
        with self.batch():  # the list, its start and the error check: one message
            try:
                self._write("list_voltage", values=values, count=int(levels.size))
                if binary:
                    self._write("binary_format")
                self._write("initiate")
                wait = self.dialect.initiate_wait
                if wait is not None and not wait.rstrip().endswith("?"):
                    self._write("initiate_wait")  # holds what follows until the run is over
                run_s = levels.size * (settle_s + nplc / _SLOWEST_LINE_HZ + _LIST_MARGIN_S)
                with self._patience(2 * run_s):
                    if wait is not None and wait.rstrip().endswith("?"):
                        self._parse("initiate_wait", self._query("initiate_wait"), _done)
                    self.check_errors()  # answered once the run is over; a refused list stops
                data = self._fetch(binary, int(levels.size))
            finally:
                for key in ("ascii_format", "fixed_mode"):
                    self._write_if_known(key)
        sweep = self._split(data, levels.size)
        self._check_clamp_events(sweep[2])
        return sweep

    def _clamp_events(self) -> int:
        """The status event bits since the last read (0 where the dialect has no such query)."""
        if self.dialect.list_clamp_event is None or self.dialect.list_compliance_bit is not None:
            return 0
        return self._parse("list_clamp_event", self._query("list_clamp_event"), self._status)

    def _check_clamp_events(self, limited: np.ndarray) -> None:
        """A clamp the instrument latched during the list, while no reading was counted as
        clamped: the clamp-fraction rule missed it, so the readings cannot be stored as data."""
        bit = self.dialect.compliance_bit
        if bit is None or not (self._clamp_events() >> bit) & 1 or limited.any():
            return
        detail = f"the instrument latched its current limit (status event bit {bit}) during the "
        detail += f"list, but no reading came within {self.dialect.fraction:g} of the limit"
        hint = "lower clamp_fraction in the dialect, from the limit accuracy in the manual"
        raise InstrumentError(self.resource, self.dialect.list_clamp_event, detail, hint=hint)

    def _fetch(self, binary: bool, points: int) -> np.ndarray:
        self._flush_unread()
        text = self.dialect.render(
            "fetch", count=points, first=1, last=points, **self.address("fetch")
        )
        fetch = self._with_pending(text)
        self._fetched = "a binary block"
        if binary:
            big = bool(self.dialect.binary_big_endian)
            items = points * len(self.dialect.fetch_fields or ())
            datatype = self.dialect.block_datatype
            return self.transport.query_block(fetch, datatype=datatype, big_endian=big, items=items)
        reply = self.transport.query(fetch)
        self._fetched = f"reply {_excerpt(reply)}"
        numbers_ = [self._parse("fetch", field, parse_number) for field in flat_fields(reply)]
        return np.array(numbers_, dtype=float)

    def _split(self, data: np.ndarray, points: int) -> Sweep:
        names = self.dialect.fetch_fields or ()
        if data.size != points * len(names):
            self._unread = True
            detail = f"{data.size} values for {points} points of {list(names)}"
            detail += f" ({self._fetched})"
            raise ReplyError(self.resource, self.dialect.fetch, detail)
        table = {name: data[k :: len(names)].astype(float) for k, name in enumerate(names)}
        voltage, current = (special_values(table[name]) for name in ("voltage", "current"))
        bit = self.dialect.list_compliance_bit
        if "status" in table and bit is not None:
            bits = table["status"].astype(np.int64)
            limited = ((bits >> bit) & 1).astype(bool)
        else:
            limited = np.abs(current) >= self.dialect.fraction * (self._limit_a or np.inf)
        return voltage, current, limited

    @contextmanager
    def _patience(self, extra_s: float) -> Iterator[None]:
        """A longer reply timeout while the instrument works through a list."""
        before = self.transport.timeout_s
        self.transport.timeout_s = before + extra_s
        try:
            yield
        finally:
            self.transport.timeout_s = before

    def address(self, key: str) -> dict[str, int]:
        """{channel} for a key that names it (a mainframe's command), else nothing."""
        text = getattr(self.dialect, key)
        return (
            {"channel": self.channel}
            if text and key != "select_channel" and ("{channel}" in text)
            else {}
        )

    def _write(self, key: str, **values: object) -> None:
        message = self.dialect.render(key, **values, **self.address(key))
        self._recent.append(message)
        if not self._batching:
            self.transport.write(message)
            return
        limit = self.dialect.max_message_bytes or 0
        if self._pending and len(_joined([*self._pending, message])) > limit:
            self._flush()
        self._pending.append(message)

    def _flush(self) -> None:
        """Send the held commands as one message."""
        if self._pending:
            message = _joined(self._pending)
            self._pending.clear()
            self.transport.write(message)

    def _flush_quietly(self) -> None:
        """`_flush` on a way out: a failure is logged, not raised over the error at hand."""
        try:
            self._flush()
        except Exception as exc:
            self._pending.clear()
            log.warning("held commands not sent to %s: %s", self.resource, exc)

    def _with_pending(self, query: str) -> str:
        """`query` with the held commands in front, as one message (if it stays in the limit)."""
        if not self._pending:
            return query
        message = _joined([*self._pending, query])
        if len(message) > (self.dialect.max_message_bytes or 0):
            self._flush()
            return query
        self._pending.clear()
        return message

    def _write_if_known(self, key: str) -> None:
        if getattr(self.dialect, key) is None:
            log.debug("%s: dialect %s has no %s; skipped", self.resource, self.dialect.name, key)
            return
        self._write(key)

    def _query(self, key: str) -> str:
        self._flush_unread()
        text = self.dialect.render(key, **self.address(key))
        return self.transport.query(self._with_pending(text))

    def _flush_unread(self) -> None:
        if self._unread:
            self._unread = False
            self.transport.clear()

    def _parse(self, key: str, text: str, parser: Callable[[str], T]) -> T:
        try:
            return parser(text)
        except ReplyError as exc:
            self._unread = True
            raise ReplyError(self.resource, self.dialect.template(key), exc.detail) from exc

    def _bool(self, text: str) -> bool:
        return parse_bool(text, words=bool(self.dialect.boolean_words))

    def _error_entry(self, text: str) -> tuple[int, str]:
        return parse_error_entry(text, quoted=self.dialect.error_text_quoted is not False)

    def _status(self, text: str) -> int:
        return parse_status(text, as_float=bool(self.dialect.status_as_float))

    def _configure_timing(self, nplc: float, settle_s: float) -> None:
        if self.dialect.set_aperture_nplc is not None:
            self._write("set_aperture_nplc", nplc=float(nplc))
        self._settle_s = settle_s if self.dialect.set_settle is None else 0.0
        if self.dialect.set_settle is not None:
            self._write("set_settle", seconds=float(settle_s))

    def _configure_range(self, current_range_a: float | None) -> None:
        if current_range_a is None:
            self._write_if_known("set_current_range_auto")
        else:
            self._write("set_current_range", amps=float(current_range_a))

    def _in_compliance(self, values: dict[str, str], current_a: float) -> bool:
        bit = self.dialect.compliance_bit
        if bit is not None:
            status = self._parse("measure", values["status"], self._status)
            return bool((status >> bit) & 1)
        if self._limit_a is None or math.isnan(current_a):
            return False
        return abs(current_a) >= self.dialect.fraction * self._limit_a


def _excerpt(reply: str, most: int = 60) -> str:
    """A reply quoted for an error message, cut to `most` characters with its length said."""
    if len(reply) <= most:
        return repr(reply)
    return f"{reply[:most]!r}... ({len(reply)} characters)"


def _done(text: str) -> int:
    """The answer of a wait such as *OPC?: 1 once the operation is over."""
    if parse_int(text) != 1:
        raise ReplyError("", None, f"reply {text!r} is not 1 (operation complete)")
    return 1


def _joined(commands: list[str]) -> str:
    """Commands as one compound message: each after the first starts again from the root
    (";:"), unless it already does (":") or is a common command ("*"): IEEE 488.2 chapter 7,
    SCPI-1999 volume 1 chapter 6."""
    out = commands[0]
    for command in commands[1:]:
        out += ";" + (command if command.startswith((":", "*")) else ":" + command)
    return out


def _check_positive(**values: float) -> None:
    for name, value in values.items():
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be a finite number > 0 (got {value!r})")
