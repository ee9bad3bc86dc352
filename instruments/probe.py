"""Trying a dialect on its instrument, key by key, before any run: what `ccbench probe` does.

The output stays off: every key that can be sent with the output off is sent once, each
followed by an error check, and marked accepted, refused (with the instrument's error entry or
the reply that could not be read) or null. Keys that only work with the output on (a reading,
starting and fetching a list) are sent only when asked (`with_output`), then at 0 V into the
given current limit. Whatever happens, the probe ends with the output off and read back.

An instrument may switch its output on by itself when a reading or a list is started (some do),
so those keys count as needing the output on and are never tried without `with_output`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from instruments.dialect import Dialect
from instruments.errors import InstrumentTimeout, ReplyError, ScpiError
from instruments.scpi import parse_bool, parse_status
from instruments.smu import ScpiSmu

ACCEPTED, REFUSED, NULL, UNTRIED = "accepted", "refused", "null", "untried"
# Keys that need the output on (or may switch it on): tried only with `with_output`.
OUTPUT_ON_KEYS = ("measure", "initiate", "initiate_wait", "fetch")
# What a null key means for a run, in words.
NULL_MEANS = {
    "identify": "the instrument is not identified; resynchronising can only drain the input",
    "clear_status": "no clear-status command is sent",
    "operation_complete": "the setup is not waited for",
    "source_voltage_mode": "the source function is left as it is",
    "set_settle": "the driver waits the settling time itself",
    "set_aperture_nplc": "the aperture is left as the instrument has it",
    "set_current_range": "fixed current ranges cannot be used",
    "set_current_range_auto": "the range is left as the instrument has it",
    "sense_functions": "the measured functions are left as the instrument has them",
    "select_channel": "no switch matrix: channel 1 only",
    "open_all_channels": "nothing opens the channels at the end",
    "interlock_query": "no interlock can be read: levels above the touch-safe voltage are refused",
    "list_voltage": "no source lists: sweeps go point by point",
    "binary_format": "lists come back as ASCII",
    "list_clamp_event": "a clamp below the clamp fraction in a list is not caught",
}

# Keys a run sends only when its recipe asks for what they do: refused, they limit which runs
# can work (a run stops before such a level when the interlock cannot be read; a fixed current
# range is asked only by a recipe that sets one).
LIMITING_KEYS = {
    "interlock_query": "runs are limited to the touch-safe voltage (the interlock cannot be read)",
    "set_current_range": "only recipes without a fixed current range can run (autorange)",
}


@dataclass(frozen=True)
class KeyResult:
    key: str
    outcome: str  # ACCEPTED, REFUSED, NULL or UNTRIED
    detail: str = ""  # what was sent and answered, the error entry, or what null means


@dataclass
class ProbeReport:
    identity: str
    stale_errors: list[tuple[int, str]] = field(default_factory=list)
    results: list[KeyResult] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)  # why a run cannot work
    output_read_back: bool | None = None  # the last read-back: False = off (None: unread)
    output_switched_on: bool = False

    @property
    def can_run(self) -> bool:
        return not self.problems and self.output_read_back is False

    notes: list[str] = field(default_factory=list)  # what limits a run without stopping it

    def add(self, key: str, outcome: str, detail: str = "") -> None:
        self.results.append(KeyResult(key, outcome, detail))
        if outcome == REFUSED and key in LIMITING_KEYS:
            self.notes.append(f"{key} was refused: {LIMITING_KEYS[key]}")
        elif outcome == REFUSED:
            self.problems.append(f"{key} was refused: {detail}")


def probe(
    smu: ScpiSmu,
    *,
    channels: tuple[int, ...],
    limit_a: float,
    with_output: bool = False,
) -> ProbeReport:
    """Try every key of `smu.dialect` on its instrument (see the module); never raises an
    instrument error for a refused key (it is in the report), and always ends with the output
    off and read back (an error switching it off is raised after the attempt)."""
    report = ProbeReport(identity=smu.identity)
    try:
        smu.output(False)
        smu.set_voltage(0.0)
        report.stale_errors = _stale(smu)
        _try_off_keys(smu, report, channels, limit_a)
        if with_output:
            _try_on_keys(smu, report, limit_a)
        else:
            for key in OUTPUT_ON_KEYS:
                _untried(smu.dialect, report, key)
        problem = smu.dialect.channels_problem(channels)
        if problem is not None:
            report.problems.append(str(problem))
    finally:
        _end_off(smu, report)
    return report


def _stale(smu: ScpiSmu) -> list[tuple[int, str]]:
    """The error queue emptied: what it held before the probe sent anything."""
    try:
        smu.check_errors()
    except ScpiError as exc:
        return list(exc.entries)
    return []


def _try_off_keys(
    smu: ScpiSmu, report: ProbeReport, channels: tuple[int, ...], limit_a: float
) -> None:
    d = smu.dialect
    report.add("identify", *(_identified(smu) if d.identify else (NULL, NULL_MEANS["identify"])))
    report.add("next_error", ACCEPTED, "the error queue answered until empty")
    _command(smu, report, "reset")
    _command(smu, report, "clear_status")
    for index, command in enumerate(d.setup or ()):
        _try(smu, report, f"setup[{index}]", lambda c=command: _send(smu, c))
    _query(smu, report, "operation_complete", lambda text: text.strip() == "1")
    _command(smu, report, "source_voltage_mode")
    _command(smu, report, "set_voltage", volts=0.0)
    _command(smu, report, "set_current_limit", amps=limit_a)
    _command(smu, report, "set_settle", seconds=1e-3)
    _command(smu, report, "set_aperture_nplc", nplc=1.0)
    _command(smu, report, "set_current_range", amps=limit_a)
    _command(smu, report, "set_current_range_auto")
    _command(smu, report, "sense_functions")
    words = bool(d.boolean_words)
    _query(smu, report, "output_query", lambda text: parse_bool(text, words=words) is False)
    _command(smu, report, "select_channel", channel=channels[0])
    _command(smu, report, "open_all_channels")
    _query(smu, report, "interlock_query", lambda text: parse_bool(text, words=words) in (0, 1))
    status = bool(d.status_as_float)
    _query(smu, report, "list_clamp_event", lambda text: parse_status(text, as_float=status) >= 0)
    _command(smu, report, "list_voltage", values="0.000000E+00,0.000000E+00", count=2)
    _command(smu, report, "binary_format")
    _command(smu, report, "ascii_format")
    _command(smu, report, "fixed_mode")
    off = d.render("output", state="OFF", **smu.address("output"))
    report.add("output", ACCEPTED, f"{off} (ON only with --with-output)")


def _try_on_keys(smu: ScpiSmu, report: ProbeReport, limit_a: float) -> None:
    """At 0 V into `limit_a`: one reading and, where the dialect has lists, a list of two."""
    smu.set_voltage(0.0)
    smu.set_current_limit(limit_a)
    report.output_switched_on = True
    smu.output(True)
    _try(smu, report, "measure", lambda: _reading(smu))
    if smu.dialect.has_lists:
        _try(smu, report, "initiate", lambda: _list(smu, limit_a))
        for key in ("initiate_wait", "fetch"):
            if getattr(smu.dialect, key) is None:
                report.add(key, NULL, "no wait after initiate")
            else:
                report.add(key, ACCEPTED, "with the list above")
    else:
        for key in ("initiate", "initiate_wait", "fetch"):
            report.add(key, NULL, NULL_MEANS["list_voltage"])
    smu.output(False)


def _reading(smu: ScpiSmu) -> str:
    reading = smu.measure()
    smu.check_errors()
    return f"{reading.voltage_v:g} V, {reading.current_a:g} A at 0 V"


def _list(smu: ScpiSmu, limit_a: float) -> str:
    voltage, current, _ = smu.list_sweep([0.0, 0.0], limit_a=limit_a, nplc=1.0, settle_s=0.0)
    smu.check_errors()
    return f"2 points at 0 V read back ({len(voltage)} voltages, {len(current)} currents)"


def _untried(d: Dialect, report: ProbeReport, key: str) -> None:
    if getattr(d, key) is None:
        report.add(key, NULL, NULL_MEANS.get(key, "not needed"))
    else:
        report.add(key, UNTRIED, "needs the output on: try --with-output")


def _identified(smu: ScpiSmu) -> tuple[str, str]:
    return ACCEPTED, f"{smu.dialect.identify} -> {smu.identity}"


def _send(smu: ScpiSmu, message: str) -> str:
    smu.transport.write(message)
    smu.check_errors()
    return message


def _command(smu: ScpiSmu, report: ProbeReport, key: str, **values: object) -> None:
    if key == "select_channel" and smu.dialect.addresses_channels:
        report.add(key, NULL, "a mainframe: each command names its channel")
        return
    if getattr(smu.dialect, key) is None:
        report.add(key, NULL, NULL_MEANS.get(key, "not sent"))
        return
    text = smu.dialect.render(key, **values, **smu.address(key))
    _try(smu, report, key, lambda: _send(smu, text))


def _query(smu: ScpiSmu, report: ProbeReport, key: str, good: Callable[[str], bool]) -> None:
    if getattr(smu.dialect, key) is None:
        report.add(key, NULL, NULL_MEANS.get(key, "not asked"))
        return

    def ask() -> str:
        text = smu.dialect.render(key, **smu.address(key))
        reply = smu.transport.query(text)
        try:
            fine = good(reply)
        except ReplyError as exc:
            raise ReplyError(smu.resource, text, exc.detail) from exc
        if not fine:
            raise ReplyError(smu.resource, text, f"reply {reply[:40]!r} is not what it should be")
        smu.check_errors()
        return f"{text} -> {reply.strip()[:40]}"

    _try(smu, report, key, ask)


def _try(smu: ScpiSmu, report: ProbeReport, key: str, action: Callable[[], str]) -> None:
    try:
        report.add(key, ACCEPTED, action())
    except ScpiError as exc:
        entries = "; ".join(f"{code},{text}" for code, text in exc.entries)
        report.add(key, REFUSED, f"{exc.command or key}: {entries}")
    except ReplyError as exc:
        report.add(key, REFUSED, exc.detail)
        smu.transport.clear()  # the rest of that reply must not answer the next query
    except InstrumentTimeout as exc:  # no answer (the link resynchronises at the next query)
        # a query the instrument does not know often queues an error and answers nothing: read
        # it here, so that it is not blamed on the next key
        report.add(key, REFUSED, f"{exc.command or key}: {exc.detail}{_queued(smu)}")


def _queued(smu: ScpiSmu) -> str:
    try:
        smu.check_errors()
    except ScpiError as exc:
        return "; " + "; ".join(f"{code},{text}" for code, text in exc.entries)
    return ""


def _end_off(smu: ScpiSmu, report: ProbeReport) -> None:
    """Output off and 0 V, then read back; raises only if the read-back itself fails."""
    smu.safe_state()
    report.output_read_back = smu.output_is_on()
    if report.output_read_back:
        report.problems.append("the output reads back ON after being switched off")
