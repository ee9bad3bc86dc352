"""A lot judged as 2-D arrays gives the same figures, verdicts, reasons and bins as judging each
curve on its own, whatever the mix of good parts, defects and layouts."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sequencer.judge import engine as judge_module
from sequencer.judge.engine import Judgement, judge_curve
from sequencer.judge.lotjudge import judge_lot, stack
from sequencer.model.curve import Curve
from sequencer.recipe.load import load_recipe
from tests.support.textbook import curve

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
SWEEP = np.linspace(0.0, 40.0, 81)  # the demo plan: a sweep, then 5 spots at 25 V
BASE = {rs: curve(SWEEP, lam=0.01, rs=rs) for rs in (930.0, 1000.0, 1090.0)}


def _run_curve(name: str, sweep_i, spot_i, clamped=None, volts=None) -> Curve:
    n = SWEEP.size
    level = np.r_[SWEEP, np.full(5, 25.0)]
    measured = level.copy() if volts is None else volts
    flags = np.zeros(n + 5, bool) if clamped is None else clamped
    return Curve(
        name,
        0,
        ("iv", "at-test-voltage"),
        ("sweep", "spot"),
        np.r_[np.zeros(n, int), np.ones(5, int)],
        level,
        measured,
        np.r_[sweep_i, spot_i],
        np.zeros(n + 5),
        flags,
    )


def mixed_lot(seed: int = 7) -> list[Curve]:
    rng = np.random.default_rng(seed)
    curves = []
    for k in range(24):
        base = BASE[(930.0, 1000.0, 1090.0)[k % 3]] * rng.normal(1.0, 0.01)
        noisy = base + rng.normal(0, 30e-9, base.size)
        spot = np.interp(25.0, SWEEP, base) + rng.normal(0, 30e-9, 5)
        curves.append(_run_curve(f"d{k:02d}", noisy, spot))
    zeros = rng.normal(0, 1e-9, SWEEP.size + 5)
    curves.append(_run_curve("open", zeros[:-5], zeros[-5:]))
    short = np.full(SWEEP.size + 5, 5e-3)
    curves.append(
        _run_curve("short", short[:-5], short[-5:], np.ones(SWEEP.size + 5, bool), short * 100)
    )
    dip = BASE[1000.0] * (1 - 0.1 * np.exp(-(((SWEEP - 15.0) / 1.0) ** 2)))
    curves.append(_run_curve("dip", dip, np.full(5, dip[50])))
    wobble = BASE[1000.0] * (1 + 0.03 * (-1.0) ** np.arange(SWEEP.size))
    curves.append(_run_curve("wobble", wobble, np.full(5, 1.84e-3)))
    partial = curves[0]  # interrupted after 40 points: a layout of its own
    curves.append(
        Curve("partial", 0, partial.steps, partial.kinds, partial.segment[:40],
              partial.level_v[:40], partial.voltage_v[:40], partial.current_a[:40],
              partial.time_s[:40], partial.in_compliance[:40])
    )  # fmt: skip
    curves.append(Curve.from_sweep("csv", SWEEP, BASE[930.0]))
    return curves


def _same(a: Judgement, b: Judgement) -> None:
    assert (a.device, a.classification, a.verdict) == (b.device, b.classification, b.verdict)
    assert (a.reasons, a.guard_band) == (b.reasons, b.guard_band)
    assert (a.hard_bin, a.bin_class, a.soft_bin) == (b.hard_bin, b.bin_class, b.soft_bin)
    for name, fa in a.figures.items():
        fb = b.figures[name]
        for x, y in ((fa.value, fb.value), (fa.uncertainty, fb.uncertainty)):
            # numpy may sum a row in another order inside a bigger array: last-digit noise only
            assert (math.isnan(x) and math.isnan(y)) or x == pytest.approx(y, rel=1e-12, abs=0)
        assert fa.at_least == fb.at_least


@pytest.mark.parametrize("chunk", [judge_module.CHUNK_ROWS, 4])
def test_lot_equals_curve_by_curve(monkeypatch, chunk):
    monkeypatch.setattr(judge_module, "CHUNK_ROWS", chunk)  # 4: many chunks, both cores
    settings = load_recipe(RECIPES / "demo.yaml").judge
    curves = mixed_lot()
    lot = judge_lot(curves, settings)
    assert [j.device for j in lot] == [c.device for c in curves]
    for together, c in zip(lot, curves, strict=True):
        _same(together, judge_curve(c, settings))
    kinds = {j.device: j.classification for j in lot}
    assert kinds["open"] == "open" and kinds["short"] == "short"
    assert kinds["dip"] == "non-monotonic" and kinds["wobble"] == "oscillating"
    assert kinds["partial"] == "incomplete"
    assert sum(j.verdict == "pass" for j in lot) >= 20


def test_stack_groups_by_layout_and_keeps_order():
    curves = mixed_lot()
    groups = stack(curves)
    assert sorted(len(g.rows) for g in groups) == [1, 1, len(curves) - 2]
    big = max(groups, key=lambda g: len(g.rows))
    assert big.voltage.shape == (len(curves) - 2, SWEEP.size + 5)
    assert list(big.rows) == sorted(big.rows)
