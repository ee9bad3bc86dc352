"""`ccbench run` on a station of several instruments: connect each, start each safe, measure on
all at once (sequencer.bench.parallel), and switch every output off however the run ends.

The same rules as one instrument (benchrun.on_bench), once per instrument: the safe start
before anything else, the interlock read at the start of a hazardous run, signals held except
while devices are measured, and at the end each output ramped down from its own last level,
switched off and read back (reconnecting once if needed). Each instrument's SCPI exchanges go
to its own log, `scpi-<name>.log`, so that every line can be traced to one instrument.
"""

from __future__ import annotations

from collections.abc import Callable
from contextlib import AbstractContextManager, ExitStack
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from sequencer.bench.benchrun import NOTHING_SENT, UNTOUCHED, SignalGate, exchange_log
from sequencer.bench.lotrun import DeviceDone, RunSummary, make_guard
from sequencer.bench.parallel import Lane, LaneGuard, lane_guards, run_parallel
from sequencer.plan.segments import Plan
from sequencer.recipe.instrumentspec import InstrumentSpec
from sequencer.recipe.load import Recipe
from sequencer.safety.rules import is_hazardous
from sequencer.store.runstore import RunStore

if TYPE_CHECKING:
    from instruments import Connection
    from sequencer.run.shutdown import Shutdown


# For one round over `total` devices: the callback that shows each device as it is stored.
Showing = Callable[[int], AbstractContextManager[Callable[[DeviceDone], None]]]


@dataclass
class Benches:
    """How each instrument's output was left, for the last line on screen."""

    names: list[str] = field(default_factory=list)  # connected
    shutdowns: dict[str, Shutdown] = field(default_factory=dict)
    tried: list[str] = field(default_factory=list)  # a connection was tried

    def ending(self) -> str:
        if not self.tried:
            return NOTHING_SENT
        if len(self.shutdowns) == len(self.tried) and all(
            s.off and not s.reconnected for s in self.shutdowns.values()
        ):
            count = len(self.shutdowns)
            return f"output off on all {count} instruments (read back from each)"
        return "; ".join(
            f"{name}: {self.shutdowns[name].describe() if name in self.shutdowns else UNTOUCHED}"
            for name in self.tried
        )

    def may_be_on(self) -> bool:
        """True when ccbench drove an instrument and could not read its output back off."""
        return any(not s.off for s in self.shutdowns.values())


def log_name(spec: InstrumentSpec) -> str:
    return f"scpi-{spec.name}.log"


def measure_on_benches(
    recipe: Recipe,
    plan: Plan,
    sim: bool,
    out: Path,
    store: RunStore,
    measure_rounds: Callable[[Callable[[Plan], RunSummary]], RunSummary],
    announce: Callable[[str], None],
    showing: Showing,
    benches: Benches,
    gate: SignalGate,
) -> RunSummary:
    """Connect every instrument of the station, run `measure_rounds(one_round)` on all of them,
    then switch every output off. Call it from the CLI with the run's store open. `announce`
    takes a line for the screen; `showing(total)` gives, for one round, the callback that shows
    each device as it is stored."""
    specs = recipe.station.instruments
    conns: list[Connection] = []
    guards: list[LaneGuard] = []
    with gate.held(), ExitStack() as stack:  # the shutdown below runs before signals act
        logs = [stack.enter_context(exchange_log(out / log_name(s))) for s in specs]
        stack.callback(_switch_all_off, conns, guards, specs, benches)
        for spec, log in zip(specs, logs, strict=True):
            benches.tried.append(spec.name)
            conns.append(_connect(recipe, spec, sim, log))
            benches.names.append(spec.name)
        guards += lane_guards([make_guard(recipe, conn.smu) for conn in conns])
        _start_all_safe(recipe, plan, conns, specs, announce)
        store.set_identity(
            "; ".join(c.resource for c in conns), "; ".join(c.identity for c in conns)
        )
        _note_all(store, specs, conns)
        lanes = [
            Lane(spec.name, conn.smu, guard, spec.channels)
            for spec, conn, guard in zip(specs, conns, guards, strict=True)
        ]

        def one_round(part: Plan) -> RunSummary:
            return _measure(showing, recipe, part, lanes, store)

        with gate.raising():
            return measure_rounds(one_round)


def _connect(recipe: Recipe, spec: InstrumentSpec, sim: bool, log) -> Connection:
    from instruments import connect  # start-up speed: `instruments` loads pyvisa

    resource = "sim" if sim else spec.resource
    options = recipe.station.simulator_options if resource == "sim" else None
    return connect(
        resource,
        dialect=spec.dialect,
        timeout_s=spec.timeout_s,
        spy_log=log,
        sim_options=options,
        channels=spec.channels,
        **spec.link.connect_options(),
    )


def _note_all(store: RunStore, specs: list[InstrumentSpec], conns: list[Connection]) -> None:
    from sequencer.run.startnotes import instrument_record  # start-up speed (pyvisa)

    for spec, conn in zip(specs, conns, strict=True):
        store.note_instrument(spec.name, instrument_record(conn.smu))


def _start_all_safe(recipe, plan, conns, specs, announce: Callable[[str], None]) -> None:
    from sequencer.run.shutdown import require_interlock, start_safe  # start-up speed (pyvisa)
    from sequencer.run.startnotes import instrument_notes

    for spec, conn in zip(specs, conns, strict=True):
        start_safe(conn.smu)  # the first commands after *IDN?
        announce(
            f"instrument {spec.name}: {conn.identity} at {conn.resource}, channels "
            f"{_channels(spec.channels)}"
        )
        for line in instrument_notes(conn.smu):
            announce(line)
    if is_hazardous(plan, recipe.effective_limits):
        for conn in conns:
            require_interlock(conn.smu, plan.peak_voltage_v)


def _channels(channels: tuple[int, ...]) -> str:
    if channels == tuple(range(channels[0], channels[-1] + 1)) and len(channels) > 2:
        return f"{channels[0]}-{channels[-1]}"
    return ", ".join(str(c) for c in channels)


def _switch_all_off(conns, guards, specs, benches: Benches) -> None:
    """Every connected instrument: ramp down from its own last level, off, read back."""
    from sequencer.run.shutdown import make_safe  # start-up speed: loads pyvisa

    for k, conn in enumerate(conns):
        level = guards[k].level_v if k < len(guards) else 0.0
        benches.shutdowns[specs[k].name] = make_safe(conn, level)
        conn.close()


def _measure(showing: Showing, recipe: Recipe, plan: Plan, lanes, store) -> RunSummary:
    with showing(len(plan.channels)) as shown:
        return run_parallel(recipe, plan, lanes, store, shown)
