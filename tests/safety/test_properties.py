"""Property-based: random station limits, recipe limits, device ratings and steps. An oracle
written here from the raw numbers (not from sequencer.recipe.limits) says whether the plan is
possible;
an impossible one must be refused before the first command, and a possible one, run on the
simulator, must never put a level, a compliance or a power beyond the effective limit on the
wire, nor leave the output on."""

from __future__ import annotations

import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st
from rich.console import Console

import instruments
import instruments.embedded
from sequencer.cli.main import main
from simulator import SimOptions
from simulator.server import start_server
from tests.safety.bench import STATION, loop_bench, never, read_output, write_bench

MARGIN = 1e-6  # examples this close to a limit are skipped: the oracle and the code round apart


@dataclass(frozen=True)
class Case:
    station: dict[str, Any]
    recipe: dict[str, Any]
    steps: list[tuple[float, float, float]]  # (lowest level V, highest level V, compliance A)
    limits: dict[str, float]  # recipe limits, SI
    ratings: dict[str, float]  # device ratings, SI
    station_v: float
    station_a: float
    station_w: float
    touch_v: float
    interlocked: bool
    acknowledged: bool
    judged: bool  # a forward sweep holds the judge's voltages (else `run` refuses the plan)

    def station_refused(self) -> bool:
        """A touch-safe voltage above the station's maximum is a mistake in the station file."""
        return self.touch_v > self.station_v

    def raises_a_limit(self) -> bool:
        pairs = (("v", self.station_v), ("a", self.station_a), ("w", self.station_w))
        return any(self.limits.get(k, 0.0) > ceiling for k, ceiling in pairs)

    def effective(self) -> tuple[float, float, float, float]:
        volts = min([self.station_v, self.limits.get("v", 1e9), self.ratings.get("pov", 1e9)])
        amps = min(self.station_a, self.limits.get("a", 1e9))
        watts = min(self.station_w, self.limits.get("w", 1e9))
        return volts, amps, watts, self.ratings.get("pd", 1e9)

    def device_amps(self, compliance: float) -> float:
        return min(compliance, self.ratings.get("wcc", 1e9))

    def checks(self) -> list[tuple[float, float]]:
        """(value, limit) of every comparison the pre-flight makes."""
        volts, amps, watts, pd = self.effective()
        out = []
        for low, high, comp in self.steps:
            peak = max(abs(low), abs(high))
            out += [(peak, volts), (comp, amps), (peak * comp, watts)]
            out += [(peak * self.device_amps(comp), pd), (peak, self.touch_v)]
        return out

    def possible(self) -> bool:
        volts, amps, watts, pd = self.effective()
        peak = max(max(abs(lo), abs(hi)) for lo, hi, _ in self.steps)
        if peak > self.touch_v and not (self.interlocked and self.acknowledged):
            return False
        return all(
            max(abs(lo), abs(hi)) <= volts
            and comp <= amps
            and max(abs(lo), abs(hi)) * comp <= watts
            and max(abs(lo), abs(hi)) * self.device_amps(comp) <= pd
            for lo, hi, comp in self.steps
        )


def _mv(x: float) -> str:
    return f"{x * 1e3:.6g} mV"


@st.composite
def cases(draw) -> Case:
    sv = draw(st.integers(5, 150))
    sa = draw(st.integers(1, 100)) * 1e-3
    sw = draw(st.integers(10, 2000)) * 1e-3
    touch = draw(st.sampled_from([24.0, 42.0]))
    steps_yaml, steps = [], []
    sweep_top = None  # the judge's voltages go at the first sweep's top level
    share = st.floats(0.1, 1.15)  # most examples within the limits, some just beyond
    for index in range(draw(st.integers(1, 3))):
        high = float(max(1, int(sv * draw(share))))
        comp = max(1, int(min(sa, sw / high) * 1e4 * draw(share))) * 1e-4
        comp = min(comp, 0.1)  # the simulated SMU's largest limit
        if draw(st.booleans()):
            low = -float(draw(st.integers(0, 20)))
            points = draw(st.integers(2, 6))
            body = {"name": f"s{index}", "start": f"{low:g} V", "stop": f"{high:g} V",
                    "points": points, "compliance": f"{comp * 1e3:g} mA"}  # fmt: skip
            steps_yaml.append({"sweep": body})
            sweep_top = high if sweep_top is None else sweep_top
        else:
            low = high = high * draw(st.sampled_from([1.0, -0.2]))
            body = {"name": f"s{index}", "voltage": f"{low:g} V",
                    "compliance": f"{comp * 1e3:g} mA", "repeats": 1}  # fmt: skip
            steps_yaml.append({"spot": body})
        steps.append((low, high, comp))
    factor = st.sampled_from([0.5, 0.9, 1.0, 1.0, 1.25])
    limits = draw(_optional({"v": sv * draw(factor), "a": sa * draw(factor),
                             "w": sw * draw(factor)}))  # fmt: skip
    ratings = draw(_optional({"pov": float(int(sv * draw(factor) + 1)),
                              "pd": sw * draw(factor),
                              "wcc": max(1, int(sa * 1e4 * draw(share))) * 1e-4}))  # fmt: skip
    interlocked, acknowledged = draw(st.booleans()), draw(st.booleans())
    station = {
        "tray": {"channels": 1},
        "limits": {"max_voltage": f"{sv} V", "max_current": f"{sa * 1e3:g} mA",
                   "max_power": f"{sw * 1e3:g} mW", "touch_safe_voltage": f"{touch:g} V"},
        "fixture": {"interlocked": interlocked},
    }  # fmt: skip
    names = {"v": ("max_voltage", "V", 1), "a": ("max_current", "mA", 1e3),
             "w": ("max_power", "mW", 1e3)}  # fmt: skip
    recipe: dict[str, Any] = {"steps": steps_yaml}
    if limits:
        recipe["limits"] = {names[k][0]: f"{v * names[k][2]:.9g} {names[k][1]}"
                            for k, v in limits.items()}  # fmt: skip
    rnames = {"pov": ("peak_operating_voltage", "V", 1), "pd": ("max_dissipation", "mW", 1e3),
              "wcc": ("worst_case_current", "mA", 1e3)}  # fmt: skip
    if ratings:
        recipe["ratings"] = {rnames[k][0]: f"{v * rnames[k][2]:.9g} {rnames[k][1]}"
                             for k, v in ratings.items()}  # fmt: skip
    if acknowledged:
        recipe["hazardous_voltage"] = "acknowledged"
    if sweep_top is not None:
        recipe["judge"] = {"test_voltage": f"{sweep_top:g} V", "knee_voltage": f"{sweep_top:g} V"}
    return Case(station, recipe, steps, limits, ratings, sv, sa, sw, touch, interlocked,
                acknowledged, sweep_top is not None)  # fmt: skip


def _optional(values: dict[str, float]):
    keys = sorted(values)
    return st.lists(st.sampled_from(keys), unique=True).map(lambda ks: {k: values[k] for k in ks})


def away_from_edges(case: Case) -> None:
    for value, limit in case.checks():
        assume(abs(value - limit) > MARGIN * max(1.0, limit))
    for key, ceiling in (("v", case.station_v), ("a", case.station_a), ("w", case.station_w)):
        if key in case.limits:
            gap = abs(case.limits[key] - ceiling)
            assume(gap > MARGIN * ceiling or gap == 0)


def run(folder: Path, case: Case, mp: pytest.MonkeyPatch, connect) -> tuple[int, str]:
    station = {**case.station, "instrument": {**STATION["instrument"], **connect[1]}}
    path = write_bench(folder, station=station, recipe=case.recipe)
    if connect[0] is not None:
        mp.setattr(instruments, "connect", connect[0])
    mp.setattr(instruments.embedded.EmbeddedSimulator, "start", never)
    console = Console(record=True, width=300, highlight=False)
    code = main(["run", str(path), "--out", str(folder / "run")], console=console)
    return code, console.export_text()


def outcome(case: Case, code: int) -> str:
    if case.station_refused():
        return "station refused"
    if case.raises_a_limit():
        return "recipe raised a station limit"
    if not case.possible():
        return "refused by pre-flight"
    return "refused: the judge's voltages unmeasured" if not case.judged else f"ran, exit {code}"


def check_sent(case: Case, points: list[tuple[float, float]]) -> None:
    """Every level on the wire, with the compliance in force when it was sent."""
    volts, amps, watts, pd = case.effective()
    for level, comp in points:
        assert abs(level) <= volts and comp <= amps
        assert abs(level) * comp <= watts * (1 + 1e-9)
        assert abs(level) * case.device_amps(comp) <= pd * (1 + 1e-9)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=cases())
def test_random_recipes_are_refused_before_the_wire_or_stay_within_limits(case):
    away_from_edges(case)
    bench = loop_bench(devices=1)
    with tempfile.TemporaryDirectory() as tmp, pytest.MonkeyPatch.context() as mp:
        code, text = run(Path(tmp), case, mp, (lambda *a, **k: bench.connection(), {}))
    event(outcome(case, code))
    if case.station_refused():
        assert code == 2 and "must not exceed max_voltage" in text
        assert bench.sent == []
    elif case.raises_a_limit():
        assert code == 3 and "never raise it" in text
        assert bench.sent == []
    elif not case.possible():
        assert code == 3, text
        assert bench.sent == []  # refused before the first command
    elif not case.judged:  # no sweep: every part would fail for a missing figure
        assert code == 2 and "is not measured" in text, text
        assert bench.sent == []
    else:
        assert code in (0, 3), text  # 3: a device tripped the run-time guard
        assert bench.sent[0] == "*IDN?" and bench.sent[1] == "OUTP OFF"
        check_sent(case, bench.points())
        assert bench.instrument.smu.max_applied_v() <= case.effective()[0]
        assert bench.session.handle("OUTP?") == "0"


@pytest.mark.sim
@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=cases())
def test_random_recipes_over_tcp_never_exceed_the_effective_limit(case):
    away_from_edges(case)
    with start_server(SimOptions(devices=1, clock="virtual")) as server:
        with tempfile.TemporaryDirectory() as tmp, pytest.MonkeyPatch.context() as mp:
            code, text = run(Path(tmp), case, mp, (None, {"resource": server.resource}))
        applied = float(read_output(server.resource, "SIM:LEV:MAX?"))
        count = int(read_output(server.resource, "SIM:LEV:COUN?"))
        assert read_output(server.resource) == "0"
    if case.station_refused():
        assert code == 2 and count == 0, text
    elif case.raises_a_limit() or not case.possible():
        assert code == 3, text
        assert count == 0
    elif not case.judged:
        assert code == 2 and count == 0, text
    else:
        assert code in (0, 3), text
        assert count > 0 and applied <= case.effective()[0]
