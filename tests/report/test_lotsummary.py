"""Yield, bins and the worst figures, counted again here from devices.csv."""

from __future__ import annotations

import csv
from collections import Counter

import numpy as np
import pytest

from sequencer.report import lotsummary
from sequencer.report.data import load_lot


def _rows(folder):
    with open(folder / "devices.csv", newline="") as f:
        return list(csv.DictReader(f))


def test_yield_and_bins_agree_with_devices_csv(lot_folder):
    lot = load_lot([lot_folder])
    rows = _rows(lot_folder)
    (only,) = lotsummary.yields(lot)
    assert only.devices == len(rows)
    assert only.shipped == sum(r["bin_class"] == "pass" for r in rows)
    assert only.verdicts["guard-band"] == sum(r["verdict"] == "guard-band" for r in rows) > 0
    want = Counter((int(r["hard_bin"]), r["soft_bin"]) for r in rows)
    got = {(b.hard_bin, b.soft_bin): b.count for b in lotsummary.bins(lot)}
    assert got == dict(want)
    assert sum(b.share for b in lotsummary.bins(lot)) == pytest.approx(1.0)


def test_a_retested_device_counts_once_with_its_last_result(lot_folder, retest_folder):
    lot = load_lot([lot_folder, retest_folder])
    rows = lotsummary.yields(lot)
    assert [r.devices for r in rows] == [len(_rows(lot_folder)) - 2, 2, len(_rows(lot_folder))]
    before = lotsummary.lot_yield(load_lot([lot_folder])).shipped
    assert lotsummary.lot_yield(lot).shipped == before + 2  # the short and the open now pass


def test_worst_figure_is_the_one_beyond_its_limit(lot_folder):
    lot = load_lot([lot_folder])
    first = lotsummary.standings(lot)[0]
    assert first.figure == "regulated_current"
    assert first.worst_device == "FK2611-07-016"  # 1.58 mA against min 1.62 mA
    # a share of the tolerance band (report.margins): 1.62 mA to 1.98 mA
    assert first.margin == pytest.approx((first.worst_value - 1.62e-3) / (1.98e-3 - 1.62e-3))
    assert first.margin < 0 and first.beyond >= 1 and first.guarded >= 1
    margins = [s.margin for s in lotsummary.standings(lot)]
    assert margins == sorted(margins)


def test_lower_bounds_stay_out_of_the_statistics(lot_folder):
    lot = load_lot([lot_folder])
    zt = lotsummary.standing(lot, "dynamic_impedance")
    data = lot.figure("dynamic_impedance")
    assert zt.bounds == int(data.at_least.sum()) == 1
    assert zt.capability.n == int((np.isfinite(data.value) & ~data.at_least).sum())
    assert zt.capability.mean == pytest.approx(np.mean(data.plain))


def test_figures_reported_are_the_recipes(lot_folder):
    lot = load_lot([lot_folder])
    figures = lotsummary.reported_figures(lot)
    assert figures[:4] == ["regulated_current", "limiting_voltage", "dynamic_impedance",
                           "knee_impedance"]  # fmt: skip
    assert "peak_dissipation" in figures and "reverse_current" not in figures
