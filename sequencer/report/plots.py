"""The lot's statistics as pictures: histograms against the spec limits and guard bands, the
bin Pareto and the yield; `lot_plots` makes every picture of a report.
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.ticker import MaxNLocator

from sequencer.model.judgesettings import FIGURE_UNIT
from sequencer.model.units import format_si
from sequencer.report.capability import Capability
from sequencer.report.data import Lot
from sequencer.report.ivplots import device_plot, iv_overlay
from sequencer.report.lotsummary import (
    BinRow,
    Standing,
    YieldRow,
    bins,
    label,
    ppm,
    reported_figures,
    standing,
    yields,
)
from sequencer.report.plotstyle import (
    ACCENT,
    GREY,
    INK,
    PALE,
    SYMBOL,
    Plot,
    finish,
    new_figure,
    render,
    scale_for,
    short_text,
)


def lot_plots(lot: Lot, device_rows: list[int] = ()) -> list[Plot]:
    """Yield, bins, the I-V overlay, a histogram per reported figure, then the devices."""
    plots = [
        render(yield_chart, lot, yields(lot)),
        render(bin_pareto, lot, bins(lot)),
        render(iv_overlay, lot),
    ]
    plots += [render(histogram, lot, standing(lot, f)) for f in reported_figures(lot)]
    plots += [render(device_plot, lot, row) for row in device_rows]
    return plots


def _edges(values: np.ndarray) -> np.ndarray:
    """Bins over the data alone, so a far limit does not make them coarse."""
    count = int(np.clip(math.ceil(math.sqrt(len(values))) + 3, 8, 40))
    lo, hi = float(values.min()), float(values.max())
    if hi <= lo:
        lo, hi = lo - 0.5 * abs(lo or 1), hi + 0.5 * abs(hi or 1)
    return np.linspace(lo, hi, count + 1)


def _x_range(values: np.ndarray, limits: list[float]) -> tuple[float, float]:
    """Data and the limits that lie near it (a far limit is named at the edge instead)."""
    lo, hi = float(values.min()), float(values.max())
    span = max(hi - lo, abs(hi) * 0.02, 1e-30)
    near = [x for x in limits if lo - 3 * span <= x <= hi + 3 * span]
    return min([lo, *near]) - 0.08 * span, max([hi, *near]) + 0.08 * span


def histogram(lot: Lot, st: Standing) -> Plot:
    values = lot.figure(st.figure).plain
    scale, shown_unit = scale_for(values, FIGURE_UNIT[st.figure])
    x = values * scale
    limits = [v * scale for v in (st.limit.min, st.limit.max) if v is not None]
    fig, (ax, words) = new_figure(7.6, 3.9, cols=2, ratios=(3.0, 1.0))
    if len(x):
        lo, hi = _x_range(x, limits)
        edges = _edges(x)
        ax.hist(x, bins=edges, color=ACCENT, edgecolor="white", linewidth=0.6, label="devices")
        _normal_curve(ax, st.capability, scale, (lo, hi), edges[1] - edges[0], len(x))
        ax.set_xlim(lo, hi)
    _spec_lines(ax, lot, st, scale, shown_unit)
    ax.set_xlabel(f"{label(st.figure)} ({shown_unit})")
    ax.set_ylabel("devices")
    ax.set_title(label(st.figure), pad=16)
    words.axis("off")
    words.text(
        0,
        0.98,
        _cap_text(st, scale, shown_unit),
        transform=words.transAxes,
        va="top",
        fontsize=8,
        family="monospace",
    )
    handles, names = ax.get_legend_handles_labels()
    words.legend(handles, names, loc="lower left", bbox_to_anchor=(0, 0), fontsize=7.5)
    caption = _hist_caption(lot, st, len(values))
    return finish(fig, f"hist-{st.figure}", f"Histogram: {label(st.figure)}", caption)


def _normal_curve(ax, cap: Capability, scale: float, span, width: float, n: int) -> None:
    if not cap.s > 0:
        return
    mu, s = cap.mean * scale, cap.s * scale
    grid = np.linspace(span[0], span[1], 300)
    pdf = np.exp(-0.5 * ((grid - mu) / s) ** 2) / (s * math.sqrt(2 * math.pi))
    ax.plot(grid, pdf * n * width, color=INK, linewidth=1.0, label="normal, lot mean and s")


def _spec_lines(ax, lot: Lot, st: Standing, scale: float, unit: str) -> None:
    lo, hi = ax.get_xlim()
    big_u = lot.expanded(st.figure)
    big_u = big_u[np.isfinite(big_u)]
    u_med = float(np.median(big_u)) if len(big_u) else 0.0
    si_unit = SYMBOL[FIGURE_UNIT[st.figure]]
    guard_label = f"guard band\nU = {format_si(u_med, si_unit, 3)} (median)"
    u_med *= scale
    for side, limit in (("min", st.limit.min), ("max", st.limit.max)):
        if limit is None:
            continue
        x = limit * scale
        text = f"{side} {x:g} {unit}"
        if lo <= x <= hi:
            ax.axvline(x, color=INK, linewidth=1.6)
            ax.text(
                x,
                1.0,
                text,
                transform=ax.get_xaxis_transform(),
                va="bottom",
                ha="center",
                fontsize=8,
            )
            if u_med > 0:
                inner = x + u_med if side == "min" else x - u_med
                ax.axvspan(
                    min(x, inner),
                    max(x, inner),
                    facecolor=PALE,
                    hatch="////",
                    edgecolor=GREY,
                    linewidth=0,
                    label=guard_label,
                )
                guard_label = None
        else:
            arrow = "←" if x < lo else "→"
            where = 0.01 if x < lo else 0.99
            ax.text(
                where,
                0.5,
                f"{arrow} {text}" if x < lo else f"{text} {arrow}",
                transform=ax.transAxes,
                ha="left" if x < lo else "right",
                fontsize=8,
            )


def _cap_text(st: Standing, scale: float, unit: str) -> str:
    c = st.capability
    lines = [
        f"n     {c.n}",
        f"mean  {c.mean * scale:.4g} {unit}",
        f"s     {c.s * scale:.3g} {unit}",
    ]
    if not math.isnan(c.cp):
        lines.append(f"Cp    {c.cp:.2f}")
    if not math.isnan(c.cpk):
        lines.append(f"Cpk   {c.cpk:.2f}")
        lines.append(f"95 %  {c.cpk_low:.2f} to {c.cpk_high:.2f}")
        lines.append(f"ppm   {ppm(c.ppm)} (normal)")
    if st.beyond or st.guarded:
        lines.append(f"out   {st.beyond}   guard {st.guarded}")
    return "\n".join(lines)


def _hist_caption(lot: Lot, st: Standing, n: int) -> str:
    parts = [f"{n} devices with a value"]
    if st.bounds:
        parts.append(f"{st.bounds} lower bound(s) (at least) left out")
    if lot.settings.decision == "guarded":
        parts.append("hatched: guard band inside each limit (median U = k u of the lot)")
    parts.append("Cpk interval 95 % (Bissell)")
    return "; ".join(parts) + "."


# --- bins and yield ------------------------------------------------------------------------


def bin_pareto(lot: Lot, rows: list[BinRow]) -> Plot:
    ordered = sorted(rows, key=lambda r: -r.count)
    fig, (ax,) = new_figure(7.5, 3.9)
    names = [f"bin {r.hard_bin}\n{short_text(r.soft_bin)}" for r in ordered]
    counts = [r.count for r in ordered]
    colours = [ACCENT if r.klass == "pass" else GREY for r in ordered]
    bars = ax.bar(range(len(ordered)), counts, color=colours, width=0.7)
    ax.bar_label(bars, padding=2, fontsize=8)
    ax.set_xticks(range(len(ordered)), names, fontsize=8)
    ax.set_ylabel("devices")
    ax.set_ylim(0, max([*counts, 1]) * 1.18)
    share = np.cumsum(counts) / max(sum(counts), 1) * 100
    twin = ax.twinx()
    twin.plot(range(len(ordered)), share, color=INK, marker="o", ms=3, linewidth=1)
    twin.set_ylim(0, 105)
    twin.set_ylabel("cumulative share (%)")
    twin.spines[["top"]].set_visible(False)
    ax.set_title(f"Bins of lot {lot.name} ({sum(counts)} devices)")
    caption = "Hard bin and soft bin, most devices first; pass-class bins in colour."
    return finish(fig, "bins", "Bin Pareto", caption)


def yield_chart(lot: Lot, rows: list[YieldRow]) -> Plot:
    fig, (bars, trend) = new_figure(10, 1.6 + 0.45 * len(rows) + 1.2, cols=2)
    kinds = (("pass", ACCENT), ("guard-band", PALE), ("fail", GREY), ("aborted", "#f0f0f0"))
    for k, row in enumerate(rows):
        left = 0
        for verdict, colour in kinds:
            n = row.verdicts.get(verdict, 0)
            tag = verdict if k == 0 else None
            bars.barh(k, n, left=left, color=colour, edgecolor=GREY, lw=0.4, label=tag, height=0.5)
            left += n
        bars.text(left, k, f"  {100 * row.fraction:.1f} %", va="center", fontsize=9)
    bars.set_yticks(range(len(rows)), [short_text(r.label.split(" (")[0], 24, 2) for r in rows])
    bars.set_ylim(len(rows) - 0.3, -0.7)
    bars.set_xlabel("devices")
    bars.set_xlim(0, max(r.devices for r in rows) * 1.25 or 1)
    bars.set_title("Verdicts and yield (pass-class bins)")
    bars.legend(loc="upper center", bbox_to_anchor=(0.5, -0.28), ncols=4)
    trend.xaxis.set_major_locator(MaxNLocator(integer=True))
    shipped = (lot.final["bin_class"] == "pass").to_numpy(float)
    order = np.arange(1, len(shipped) + 1)
    trend.plot(order, np.cumsum(shipped) / order * 100, color=ACCENT, linewidth=1.4)
    trend.set_ylim(0, 105)
    trend.set_xlabel("devices tested (test order)")
    trend.set_ylabel("yield so far (%)")
    trend.set_title("Running yield")
    caption = "Each device counted once, with its last result; yield = pass-class hard bins."
    return finish(fig, "yield", "Yield", caption)
