"""Time estimates: the instrument's share from settling and apertures, the commands a plan
sends, several instruments at once; checked against the simulator's own busy time."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from sequencer.bench.lotrun import make_guard
from sequencer.plan.make import make_plan
from sequencer.run.device import measure_device
from sequencer.run.estimate import Timing, after_run, estimate, predict
from sequencer.run.recorder import Recorder
from tests.support.lots import lot_smu, recipes


def _guard(recipe):
    return make_guard(recipe, lot_smu(recipe, 1)[1])


def test_the_instrument_share_is_every_readings_settling_and_aperture():
    full = recipes()[0]
    e = estimate(make_plan(full), _guard(full), [20])
    # recipes/demo.yaml: 81 points of 1 ms + 2 ms (0.1 NPLC at 50 Hz), 5 spot readings of
    # 5 ms + 2 ms [computed by hand from the recipe]
    assert e.instrument_s == pytest.approx(81 * 3e-3 + 5 * 7e-3)
    assert e.seconds == pytest.approx(20 * e.per_device_s)


def test_lists_send_fewer_commands_and_lanes_share_the_devices():
    full = recipes()[0]
    plain = estimate(make_plan(full), _guard(full), [20], lists=True)
    listed_plan = make_plan(dataclasses.replace(full, lists=True))
    listed = estimate(listed_plan, _guard(full), [20], lists=True)
    without = estimate(listed_plan, _guard(full), [20], lists=False)  # a dialect without lists
    assert listed.exchanges_s < plain.exchanges_s / 5
    assert without.exchanges_s == pytest.approx(plain.exchanges_s)
    four = estimate(listed_plan, _guard(full), [5, 5, 5, 5], lists=True)
    assert four.seconds == pytest.approx(5 * (listed.instrument_s + listed.exchanges_s)
                                         + listed.device_s)  # fmt: skip
    slow = Timing(device_s=0.5)  # a store slower than the instruments sets the pace
    assert estimate(listed_plan, _guard(full), [5, 5, 5, 5], slow).seconds == pytest.approx(10.0)


@pytest.mark.parametrize("which", [0, 1])
def test_the_instrument_share_matches_the_simulators_busy_time(which):
    recipe = recipes()[which]
    inst, smu = lot_smu(recipe, 20)
    plan = make_plan(recipe)
    guard = make_guard(recipe, smu)
    busy = []
    for channel in plan.channels:
        before = inst.clock.busy_s
        measure_device(smu, plan, channel, guard, Recorder())
        busy.append(inst.clock.busy_s - before)
    predicted = predict(recipe, plan)
    # the simulator adds 50 us a message unit (simulator/commands.py) to settling and
    # apertures; a search takes two readings on the average device, more on some
    assert np.mean(busy) == pytest.approx(predicted.instrument_s, rel=0.1)


def test_after_a_run_the_prediction_and_the_time_taken_stand_side_by_side():
    e = estimate(make_plan(recipes()[1]), _guard(recipes()[1]), [20])
    text = after_run(e, 20, 10, 2.0)
    assert text.startswith("time: took 2.0 s for 10 devices (200.0 ms a device); predicted")
    assert after_run(e, 20, 0, 0.0) == "time: took 0.0 s; no device was measured"


def test_a_station_whose_dialect_cannot_be_read_is_refused_by_the_estimate(tmp_path):
    from sequencer.model.errors import RecipeError
    from sequencer.recipe.load import load_recipe
    from tests.support.lots import ROOT

    text = (ROOT / "recipes" / "demo-station.yaml").read_text()
    station = tmp_path / "station.yaml"
    station.write_text(text.replace("dialect: scpi1999", "dialect: missing.yaml"))
    recipe = load_recipe(ROOT / "recipes" / "demo.yaml", station_path=station)
    with pytest.raises(RecipeError, match=r"instrument.dialect is unusable: .*missing.yaml"):
        predict(recipe, make_plan(recipe))


@pytest.mark.parametrize("lists", [False, True])
@pytest.mark.parametrize("joined", [None, 4096, 400])
def test_the_estimate_counts_the_messages_a_device_really_sends(lists, joined):
    from instruments.dialect import load_dialect
    from instruments.loopback import CallableTransport
    from instruments.smu import ScpiSmu

    recipe = dataclasses.replace(recipes()[0], lists=lists)  # no search: a fixed count
    _, base = lot_smu(recipe, 2)
    writes, queries = [], []

    class Counting(CallableTransport):
        def write(self, message):
            writes.append(message)
            super().write(message)

        def query(self, message):
            queries.append(message)
            return super().query(message)

    dialect = dataclasses.replace(load_dialect("scpi1999"), max_message_bytes=joined)
    smu = ScpiSmu(Counting(base.transport.handler, "counted"), dialect)
    plan = make_plan(recipe)
    measure_device(smu, plan, 1, make_guard(recipe, smu), Recorder())
    # one write costs 1 s and one query 1000 s, so the total spells out both counts
    limit = dialect.max_message_bytes
    checks = dialect.list_clamp_event is not None  # its event read before and after a list
    timing = Timing(1.0, 1000.0)
    e = estimate(plan, _guard(recipe), [1], timing, lists=lists, joined=limit, clamp_checks=checks)
    assert divmod(round(e.exchanges_s), 1000) == (len(queries), len(writes))
