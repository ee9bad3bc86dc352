"""One device judged alone (the production line's call, made cheap) gives exactly what the same
engine gives for a whole simulated lot at once, for both recipes and a lot with many defects;
and the look-up tables that replaced np.isin / nan_to_num answer what numpy's own functions do.
Speed itself is measured by benchmarks/judge_one.py, not here."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from sequencer.judge import engine as judge_module
from sequencer.judge.bins import _members
from sequencer.judge.decide import FAILING, GUARDED, IS_FAILING, IS_GUARDED
from sequencer.judge.engine import judge_arrays, judge_curve
from sequencer.judge.figures import Layout
from sequencer.judge.lotjudge import judge_lot
from sequencer.model.accuracy import DEFAULT_CURRENT, DEFAULT_VOLTAGE
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import CLASSIFICATIONS, VERDICTS
from tests.judge.test_lotjudge import _same
from tests.support.lots import measure_lot, recipes

DEVICES = 60


@pytest.fixture(scope="module", params=["full sweep", "production"])
def lot(request):
    """(settings, curves) of a simulated lot with many defects (opens, shorts, leaky, out of
    spec), measured through the real driver as a run measures it."""
    full, production = recipes()
    recipe = full if request.param == "full sweep" else production
    _, curves = measure_lot(recipe, DEVICES, defect_rate=0.3)
    return recipe.judge, curves


@pytest.mark.parametrize("chunk", [judge_module.CHUNK_ROWS, 7])
def test_one_at_a_time_equals_the_lot_at_once(lot, monkeypatch, chunk):
    monkeypatch.setattr(judge_module, "CHUNK_ROWS", chunk)  # 7: many chunks, on both cores
    settings, curves = lot
    together = judge_lot(curves, settings)
    alone = [judge_curve(c, settings) for c in curves]
    for a, b in zip(alone, together, strict=True):
        _same(a, b)
    kinds = {j.classification for j in alone}
    assert {"ok", "open", "short"} <= kinds  # the defects are there to be judged
    assert {j.verdict for j in alone} >= {"pass", "fail"}


def test_the_guarded_and_the_simple_rule_alike(lot):
    settings, curves = lot
    simple = dataclasses.replace(settings, decision="simple")
    for s in (settings, simple):
        together = judge_lot(curves, s)
        for curve, b in zip(curves, together, strict=True):
            _same(judge_curve(curve, s), b)


def test_a_shared_layout_is_the_plans_own(lot):
    """judge_curve keeps one Layout a plan; a curve changed after it was judged changes
    nothing for the next curve of that plan, and the answer is that of a fresh Layout."""
    settings, curves = lot
    first, second = curves[0], curves[1]
    judge_curve(first, settings)
    first.level_v[:] += 100.0  # its owner may reuse the arrays; the kept plan is a copy
    fresh = judge_arrays(
        Layout.of(second),
        second.voltage_v[None],
        second.current_a[None],
        second.in_compliance[None],
        settings,
    ).judgement(0, second.device)
    _same(judge_curve(second, settings), fresh)
    first.level_v[:] -= 100.0


def test_a_short_curve_and_a_csv_curve_alone_and_together():
    settings = recipes()[0].judge
    v = np.linspace(0.0, 40.0, 81)
    i = 1.8e-3 * np.tanh(v / 1.1) ** 2 * (1 + (v - 25.0) / 540.0)
    curves = [Curve.from_sweep("csv", v, i), Curve.from_sweep("short", v[:5], i[:5])]
    for curve, b in zip(curves, judge_lot(curves, settings), strict=True):
        _same(judge_curve(curve, settings), b)


def test_membership_tables_answer_what_np_isin_does():
    # numpy's np.isin is the reference: the tables must give its answer for every code.
    codes = np.arange(6)
    assert np.array_equal(IS_FAILING[codes], np.isin(codes, FAILING))
    assert np.array_equal(IS_GUARDED[codes], np.isin(codes, GUARDED))
    verdicts = np.arange(len(VERDICTS))
    for names in [("pass",), ("pass", "guard-band"), ("aborted",)]:
        wanted = [VERDICTS.index(x) for x in names]
        assert np.array_equal(_members(names, VERDICTS)[verdicts], np.isin(verdicts, wanted))
    kinds = np.arange(len(CLASSIFICATIONS))
    for names in [("open", "short"), ("compliance-limited", "oscillating", "non-monotonic")]:
        wanted = [CLASSIFICATIONS.index(x) for x in names]
        got = _members(names, CLASSIFICATIONS)[kinds]
        assert np.array_equal(got, np.isin(kinds, wanted))


@pytest.mark.parametrize("table", [DEFAULT_CURRENT, DEFAULT_VOLTAGE])
def test_the_range_of_a_reading_is_what_searchsorted_and_nan_to_num_give(table):
    # The formula the judge used before, written with numpy's own functions, is the reference.
    full, _, _ = table.arrays()
    rng = np.random.default_rng(5)
    x = np.r_[rng.normal(0, 1, 200) * 10.0 ** rng.integers(-8, 3, 200), full, -full,
              0.0, -0.0, np.nan, np.inf, -np.inf]  # fmt: skip
    reference = np.minimum(np.searchsorted(full, np.abs(np.nan_to_num(x, nan=0.0))), len(full) - 1)
    assert np.array_equal(table._parts(x)[1], reference)
    assert np.array_equal(table.range_index(np.nan_to_num(x, nan=0.0)), reference)
