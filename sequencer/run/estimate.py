"""How long a run will take, from the plan, the instrument's timing settings and the station's
instruments; printed by `ccbench check` and `ccbench run` before the run, and beside the time
the run really took after it.

Per device, on one instrument:
- instrument time: every reading's settling plus aperture (a search counts the readings it
  usually takes, kneesearch.KneeSearch.expected_points);
- exchanges: the SCPI messages the runner sends, each a write or a query round trip
  (`write_time`, `query_time` of the station's instrument entry; the defaults were measured
  here, pyvisa-py to the simulator on loopback). A point costs a level write and a reading
  query; a list a fixed handful whatever its length; every step its error check, and its
  configuration when it differs from the step before; every device its channel switch, the
  output on, the ramp down and the output off (sequencer.run.device). Where the dialect joins
  commands into one message (`max_message_bytes`), a command goes out with the query after
  it: a point is one query, a configuration one, a list two (its start with the error check,
  the fetch), a device's channel switch one, and only the ramp and the output off are writes;
- `DEVICE_S` on the computer: judging, the journal (fsync), SQLite, the CSV and the screen.
Several instruments work at once, so a run lasts as long as its busiest instrument, but no
less than the computer's own work for every device (the store is one writer).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from instruments.scpi import format_number
from sequencer.model.errors import RecipeError
from sequencer.plan.segments import Plan, Segment
from sequencer.run.device import ramp_levels
from sequencer.run.segment import MIN_LIST_POINTS, list_is_safe
from sequencer.safety.rules import Guard, no_clamp_steps

WRITE_S = 0.2e-3  # one write, pyvisa-py on loopback (measured: 0.18 ms median, demo run)
QUERY_S = 0.5e-3  # one query round trip, simulator parse included (measured: 0.43-0.5 ms)
DEVICE_S = 6e-3  # judge + journal fsync + SQLite + CSV + screen per device (measured here)
CONFIGURE = (6, 1)  # (writes, queries): mode, limit, aperture, settle, range, sense; SYST:ERR?
LIST = (5, 2)  # list + count + fields, format, INIT, restore format, restore mode; SYST:ERR?, FETC?
POINT = (1, 1)  # the level, the reading
DEVICE = (2, 2)  # ROUT:CLOS and OUTP ON; the channel's SYST:ERR?, ... (+ the ramp and OUTP OFF)
# The same with commands joined to the next query (instruments.smu.ScpiSmu.batch).
JOINED = {"configure": (0, 1), "list": (0, 2), "point": (0, 1), "device": (0, 2)}
LIST_HEADER_BYTES = 80  # the list command's text around its levels (dialects/scpi1999.yaml)
SEPARATE = {"configure": CONFIGURE, "list": LIST, "point": POINT, "device": DEVICE}


@dataclass(frozen=True)
class Timing:
    """What one exchange costs on an instrument (station keys `write_time`, `query_time`)."""

    write_s: float = WRITE_S
    query_s: float = QUERY_S
    device_s: float = DEVICE_S

    def exchanges(self, writes: float, queries: float) -> float:
        return writes * self.write_s + queries * self.query_s


@dataclass(frozen=True)
class Estimate:
    instrument_s: float  # per device: settling and apertures
    exchanges_s: float  # per device: SCPI messages
    device_s: float  # per device: the computer's own work
    seconds: float  # the whole run

    @property
    def per_device_s(self) -> float:
        return self.instrument_s + self.exchanges_s + self.device_s


def as_list(seg: Segment, plan: Plan, guard: Guard, lists: bool, settles: bool) -> bool:
    """Whether the runner will send this segment as an instrument-side list."""
    if not (plan.lists and lists) or seg.search is not None:
        return False
    if len(seg.levels_v) < MIN_LIST_POINTS or (seg.settle_s and not settles):
        return False
    return list_is_safe(seg, guard)


def estimate(
    plan: Plan,
    guard: Guard,
    lanes: Sequence[int],
    timing: Timing = Timing(),
    *,
    lists: bool = False,
    settles: bool = True,
    joined: int | None = None,
    clamp_checks: bool = False,
) -> Estimate:
    """The run's duration. `lanes`: devices per instrument; `lists`, `settles`: whether the
    dialect has source lists and a settling command; `joined`: its `max_message_bytes` (None:
    one command per message); `clamp_checks`: whether each list reads the status event before
    and after it (dialect `list_clamp_event`: two more queries a list)."""
    cost = JOINED if joined else SEPARATE
    instrument = writes = queries = 0.0
    configured = None
    for seg in plan.segments:
        points = seg.expected_points
        instrument += points * (seg.settle_s + plan.aperture_s)
        if (seg.compliance_a, seg.settle_s) != configured:
            writes, queries = writes + cost["configure"][0], queries + cost["configure"][1]
            configured = (seg.compliance_a, seg.settle_s)
        listed = as_list(seg, plan, guard, lists, settles)
        if listed and seg is plan.segments[0] and not joined:
            writes += 1  # the list's first level, sent before the output goes on
        point = cost["point"]
        each = cost["list"] if listed else (point[0] * points, point[1] * points)
        if listed and clamp_checks:
            each = (each[0], each[1] + 2)
        if listed and joined and _list_bytes(seg) > joined:
            # a list too long to share: it alone, and what came before (unless that went out
            # with the event read just before the list)
            each = (each[0] + (1 if clamp_checks else 2), each[1])
        writes, queries = writes + each[0], queries + each[1] + 1  # + the step's error check
    last = _last_level(plan)
    writes += cost["device"][0] + len(ramp_levels(last)) + 1
    queries += cost["device"][1] - 1
    exchanges = timing.exchanges(writes, queries)
    if len(lanes) <= 1:  # one instrument: measuring and storing take turns
        seconds = sum(lanes) * (instrument + exchanges + timing.device_s)
    else:  # each lane runs ahead; the store keeps up unless its own work is the larger
        busiest = max(lanes) * (instrument + exchanges)
        seconds = max(busiest + timing.device_s, sum(lanes) * timing.device_s)
    return Estimate(instrument, exchanges, timing.device_s, seconds)


def _list_bytes(seg: Segment) -> int:
    """About how long a segment's source-list command is: its levels in NR3 and a header."""
    return sum(len(format_number(v)) + 1 for v in seg.levels_v) + LIST_HEADER_BYTES


def _last_level(plan: Plan) -> float:
    seg = plan.segments[-1]
    if seg.search is not None:
        return seg.search.start_v
    return seg.levels_v[-1] if seg.levels_v else 0.0


def predict(recipe, plan: Plan, lanes: Sequence[int] | None = None) -> Estimate:
    """The estimate for a recipe's run on its station (reads the instrument's dialect file)."""
    from instruments import DialectError, load_dialect  # start-up speed: `instruments` loads pyvisa

    station = recipe.station
    specs = station.instruments
    try:
        dialect = load_dialect(station.dialect)
    except DialectError as exc:  # found by `check` already, not first by `run`
        raise RecipeError(station.file, None, "instrument.dialect", f"is unusable: {exc}") from None
    _check_channels(station, plan, load_dialect, DialectError)
    guard = Guard(recipe.effective_limits, lambda: True, no_clamp_steps(recipe.steps))
    if lanes is None:
        wanted = set(plan.channels)
        lanes = [len(wanted & set(s.channels)) for s in specs] if specs else [len(wanted)]
    first = specs[0] if specs else None
    write = first.write_time_s if first and first.write_time_s else WRITE_S
    query = first.query_time_s if first and first.query_time_s else QUERY_S
    timing = Timing(write, query)
    settles = dialect.set_settle is not None
    joined = dialect.max_message_bytes
    checks = dialect.list_clamp_event is not None and dialect.list_compliance_bit is None
    return estimate(
        plan, guard, lanes, timing, lists=dialect.has_lists, settles=settles, joined=joined,
        clamp_checks=checks,
    )  # fmt: skip


def _check_channels(station, plan: Plan, load_dialect, DialectError) -> None:
    """A dialect without a switch command cannot reach a channel beyond 1: refused here, where
    `check` and `run` both pass, before anything is opened (one line naming the dialect key)."""
    wanted = set(plan.channels)
    pairs = [(s.dialect, wanted & set(s.channels)) for s in station.instruments] or [
        (station.dialect, wanted)
    ]
    for dialect_name, channels in pairs:
        try:
            problem = load_dialect(dialect_name).channels_problem(tuple(sorted(channels)))
        except DialectError as exc:  # a further instrument's dialect: refused like the first
            raise RecipeError(exc.file, exc.line, exc.key or "", exc.detail) from None
        if problem is not None:  # the dialect's own file:line, key and what to do
            raise RecipeError(problem.file, problem.line, "select_channel", problem.detail)


def describe(e: Estimate) -> str:
    return (
        f"estimated {_seconds(e.seconds)} ({1e3 * e.per_device_s:.1f} ms a device: "
        f"instrument {1e3 * e.instrument_s:.1f}, commands {1e3 * e.exchanges_s:.1f}, "
        f"computer {1e3 * e.device_s:.1f})"
    )


def _seconds(s: float) -> str:
    if s < 120 or not math.isfinite(s):
        return f"{s:.1f} s"
    return f"{s / 60:.1f} min" if s < 7200 else f"{s / 3600:.1f} h"


def after_run(e: Estimate, planned: int, done: int, took_s: float) -> str:
    """The prediction beside what the run took, for the screen after a run."""
    if not done:
        return f"time: took {took_s:.1f} s; no device was measured"
    predicted = e.seconds * done / max(planned, 1)
    ratio = took_s / predicted if predicted > 0 else math.nan
    return (
        f"time: took {_seconds(took_s)} for {done} devices ({1e3 * took_s / done:.1f} ms a "
        f"device); predicted {_seconds(predicted)} ({ratio:.2f} x the prediction)"
    )
