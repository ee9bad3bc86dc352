"""What a lot report says, as plain data: yield, bins, capability and the worst figures.

Shared by the terminal summary, the HTML report and the plots, so all three say the same. Yield
is the share of devices whose hard bin is of class pass (what ships); a guard-band device
counts as yield only where the recipe puts it into a pass bin. Retested devices count once,
with their last result.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sequencer.judge import decide
from sequencer.judge.reasons import show
from sequencer.model.judgesettings import FIGURE_INFO, FIGURES, VERDICTS, FigureLimit
from sequencer.report.capability import Capability, capability, observed_ppm
from sequencer.report.data import Lot
from sequencer.report.margins import margin_text
from sequencer.report.margins import margins as figure_margins
from sequencer.report.softbins import soft_bin_numbers


@dataclass(frozen=True)
class YieldRow:
    label: str
    devices: int
    shipped: int  # in a pass-class bin
    verdicts: dict[str, int]

    @property
    def fraction(self) -> float:
        return self.shipped / self.devices if self.devices else math.nan


@dataclass(frozen=True)
class BinRow:
    hard_bin: int
    klass: str
    soft_bin: str
    soft_number: int
    count: int
    share: float


@dataclass(frozen=True)
class Standing:
    """One figure of the lot against its limits."""

    figure: str
    limit: FigureLimit
    capability: Capability
    worst_device: str
    worst_value: float
    margin: float  # of the worst device, a share of its scale (report.margins); < 0: beyond
    beyond: int  # devices outside the limits
    guarded: int  # devices in a guard band
    bounds: int  # lower bounds ("at least"), left out of the statistics
    counted_ppm: float  # plain values outside the limits, per million of them


def yields(lot: Lot) -> list[YieldRow]:
    """One row per run (with the devices whose last result it holds), then the whole lot."""
    final = lot.final
    rows = []
    for run in lot.runs.itertuples():
        name = f"{run.lot} ({Path(str(run.folder)).name})"
        rows.append(_yield_row(name, final[final["run"] == run.run]))
    if len(rows) > 1:
        rows.append(_yield_row(f"all ({lot.name})", final))
    return rows


def lot_yield(lot: Lot) -> YieldRow:
    return _yield_row(lot.name, lot.final)


def _yield_row(label: str, devices) -> YieldRow:
    counts = {v: int((devices["verdict"] == v).sum()) for v in VERDICTS}
    shipped = int((devices["bin_class"] == "pass").sum())
    return YieldRow(label, len(devices), shipped, counts)


def soft_numbers(lot: Lot) -> dict[str, int]:
    return soft_bin_numbers(lot.settings.bins, lot.devices["soft_bin"].unique())


def bins(lot: Lot) -> list[BinRow]:
    """Every (hard bin, soft bin) that holds a device, by hard bin then soft bin number."""
    final = lot.final
    numbers = soft_numbers(lot)
    groups = final.groupby(["hard_bin", "bin_class", "soft_bin"], sort=False).size()
    total = max(len(final), 1)
    rows = [
        BinRow(int(h), str(k), str(s), numbers[str(s)], int(n), n / total)
        for (h, k, s), n in groups.items()
    ]
    return sorted(rows, key=lambda r: (r.hard_bin, r.soft_number))


def reported_figures(lot: Lot) -> list[str]:
    """The figures the recipe asks for or limits, and any other the lot has values of."""
    wanted = set(lot.settings.required()) | {x.figure for x in lot.settings.limits}
    known = {f for f in FIGURES if np.isfinite(lot.figure(f).value).any()}
    return [f for f in FIGURES if f in wanted or f in known]


def standing(lot: Lot, figure: str) -> Standing:
    data = lot.figure(figure)
    limit = lot.limit(figure)
    cap = capability(data.plain, limit.min, limit.max)
    status = decide.limit_status(data.value, data.at_least, lot.expanded(figure), limit)
    margins = figure_margins(data.value, data.at_least, limit)
    worst = int(np.nanargmin(margins)) if np.isfinite(margins).any() else -1
    return Standing(
        figure,
        limit,
        cap,
        str(data.devices[worst]) if worst >= 0 else "",
        float(data.value[worst]) if worst >= 0 else math.nan,
        float(margins[worst]) if worst >= 0 else math.nan,
        int(np.isin(status, decide.FAILING).sum()),
        int(np.isin(status, decide.GUARDED).sum()),
        int(data.at_least.sum()),
        observed_ppm(data.plain, limit.min, limit.max),
    )


def standings(lot: Lot) -> list[Standing]:
    """Every limited figure, the one closest to (or furthest beyond) its limits first."""
    limited = [x.figure for x in lot.settings.limits]
    rows = [standing(lot, f) for f in reported_figures(lot) if f in limited]
    return sorted(rows, key=lambda r: (math.isnan(r.margin), r.margin))


def label(figure: str) -> str:
    return FIGURE_INFO[figure][2]


# Short names for narrow tables, each explained in the README's table of symbols ("@Vpk": at the
# peak operating voltage; not "Ppk", which is a capability index).
SYMBOLS = {
    "regulated_current": "IP",
    "limiting_voltage": "VL",
    "dynamic_impedance": "ZT",
    "knee_impedance": "ZK",
    "reverse_current": "IR",
    "peak_current": "I@Vpk",
    "peak_dissipation": "P@Vpk",
}


def long_label(figure: str) -> str:
    return f"{label(figure)} ({SYMBOLS[figure]})"


# --- words and numbers for people (the terminal and the HTML say the same) ----------------


def percent(x: float) -> str:
    return "—" if math.isnan(x) else f"{100 * x:.1f} %"


def number(x: float, digits: int = 2) -> str:
    return "—" if math.isnan(x) else f"{x:.{digits}f}"


def ppm(x: float) -> str:
    if math.isnan(x):
        return "—"
    if 0 < x < 0.01:
        return "< 0.01"
    return f"{x:.2g}" if x < 10 else f"{x:,.0f}"


def figure_value(figure: str, x: float | None) -> str:
    return "—" if x is None or math.isnan(x) else show(figure, x)


def limits_text(st: Standing) -> str:
    low = figure_value(st.figure, st.limit.min) if st.limit.min is not None else ""
    high = figure_value(st.figure, st.limit.max) if st.limit.max is not None else ""
    if low and high:
        return f"{low} – {high}"
    return f"≥ {low}" if low else (f"≤ {high}" if high else "none")


YIELD_HEAD = ("run", "devices", "pass", "guard band", "fail", "aborted", "yield")
VERDICT_ORDER = ("pass", "guard-band", "fail", "aborted")
BIN_HEAD = ("soft bin", "hard bin", "class", "soft bin number", "devices", "share")
STANDING_HEAD = ("figure", "limits", "worst device", "value", "margin", "out", "guard", "Cpk")
CAPABILITY_HEAD = ("figure", "n", "mean", "s", "Cp", "Cpk (95 %)", "model ppm", "seen ppm")


def yield_cells(r: YieldRow) -> list[str]:
    counts = [str(r.verdicts[v]) for v in VERDICT_ORDER]
    return [r.label, str(r.devices), *counts, percent(r.fraction)]


def bin_cells(r: BinRow) -> list[str]:
    number_text = str(r.soft_number)
    return [r.soft_bin, str(r.hard_bin), r.klass, number_text, str(r.count), percent(r.share)]


def short_name(figure: str) -> str:
    return SYMBOLS[figure]


def standing_cells(r: Standing, name: Callable[[str], str] = short_name) -> list[str]:
    """The margin is the worst device's distance inside its nearer limit (report.margins)."""
    return [
        name(r.figure),
        limits_text(r),
        r.worst_device,
        figure_value(r.figure, r.worst_value),
        margin_text(r.margin, r.limit),
        str(r.beyond),
        str(r.guarded),
        number(r.capability.cpk),
    ]


def capability_cells(r: Standing, name: Callable[[str], str] = short_name) -> list[str]:
    c = r.capability
    interval = "" if math.isnan(c.cpk_low) else f" ({c.cpk_low:.2f}–{c.cpk_high:.2f})"
    return [
        name(r.figure),
        str(c.n),
        figure_value(r.figure, c.mean),
        figure_value(r.figure, c.s),
        number(c.cp),
        number(c.cpk) + interval,
        ppm(c.ppm),
        ppm(r.counted_ppm),
    ]
