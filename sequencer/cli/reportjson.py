"""`ccbench report --json`: the lot summary of `report --text` as one JSON document, from the
same rows (report.lotsummary) the terminal and the HTML page are drawn from. Keys: jsonout;
figures SI with `unit` beside them, shares and yields fractions of 1."""

from __future__ import annotations

from typing import Any

from sequencer.cli.jsonout import number
from sequencer.model.judgesettings import FIGURE_UNIT
from sequencer.report.data import Lot, bound_column, u_column, value_column
from sequencer.report.lotsummary import (
    SYMBOLS,
    BinRow,
    Standing,
    YieldRow,
    bins,
    label,
    reported_figures,
    standing,
    standings,
    yields,
)
from sequencer.report.margins import margin_scale


def report_document(lot: Lot, rows: list[int]) -> dict[str, Any]:
    return {
        "lot": lot.name,
        "product": lot.product,
        "notes": list(lot.notes),
        "dry_run": bool("simulator" in lot.runs and lot.runs["simulator"].notna().any()),
        "units": {
            "yield": "fraction of 1 (parts in pass-class bins over parts)",
            "share": "fraction of 1",
            "margin": "fraction of margin_scale: the band (max - min), the max or the min "
            "(report.margins); negative: beyond the limit",
        },
        "yields": [_yield(r) for r in yields(lot)],
        "bins": [_bin(r) for r in bins(lot)],
        "closest_to_limits": [_standing(r) for r in standings(lot)],
        "capability": [_capability(standing(lot, f)) for f in reported_figures(lot)],
        "devices": [_device(lot, row) for row in rows],
    }


def _yield(r: YieldRow) -> dict[str, Any]:
    return {
        "label": r.label, "parts": r.devices, "in_pass_bins": r.shipped,
        "verdicts": dict(r.verdicts), "yield": r.fraction,
    }  # fmt: skip


def _bin(r: BinRow) -> dict[str, Any]:
    return {
        "hard_bin": r.hard_bin, "class": r.klass, "soft_bin": r.soft_bin,
        "soft_bin_number": r.soft_number, "parts": r.count, "share": r.share,
    }  # fmt: skip


def _figure(figure: str) -> dict[str, Any]:
    return {"figure": figure, "symbol": SYMBOLS[figure], "name": label(figure),
            "unit": FIGURE_UNIT[figure]}  # fmt: skip


def _standing(r: Standing) -> dict[str, Any]:
    return {
        **_figure(r.figure),
        "limit_min": number(r.limit.min), "limit_max": number(r.limit.max),
        "worst_device": r.worst_device or None, "worst_value": number(r.worst_value),
        "margin": number(r.margin), "margin_scale": margin_scale(r.limit),
        "beyond_limits": r.beyond, "in_guard_band": r.guarded,
        "lower_bounds": r.bounds, "cpk": number(r.capability.cpk),
    }  # fmt: skip


def _capability(r: Standing) -> dict[str, Any]:
    c = r.capability
    return {
        **_figure(r.figure),
        "n": c.n, "mean": number(c.mean), "s": number(c.s), "cp": number(c.cp),
        "cpk": number(c.cpk), "cpk_low": number(c.cpk_low), "cpk_high": number(c.cpk_high),
        "confidence": c.confidence, "model_ppm": number(c.ppm),
        "seen_ppm": number(r.counted_ppm),
    }  # fmt: skip


def _device(lot: Lot, row: int) -> dict[str, Any]:
    dev = lot.devices.set_index("row").loc[row]
    figures = []
    for figure in reported_figures(lot):
        figures.append(
            {
                **_figure(figure),
                "value": number(dev[value_column(figure)]),
                "u": number(dev[u_column(figure)]),
                "at_least": bool(dev[bound_column(figure)]),
            }
        )
    return {
        "device": str(dev["device"]), "verdict": str(dev["verdict"]),
        "hard_bin": None if dev["hard_bin"] != dev["hard_bin"] else int(dev["hard_bin"]),
        "soft_bin": str(dev["soft_bin"]), "reasons": str(dev["reasons"] or ""),
        "figures": figures,
    }  # fmt: skip
