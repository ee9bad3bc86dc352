"""I-V pictures: the lot's curves against the recipe's limit windows, and one device.

The windows drawn are those the recipe states: the regulated-current box at the test voltage
over the slope window, the limiting-voltage maximum, the peak-dissipation hyperbola. Readings
taken at compliance are never joined into a curve; they are marked x.
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.patches import Rectangle

from sequencer.model.judgesettings import FIGURE_UNIT
from sequencer.model.units import format_si
from sequencer.report.data import Lot, bound_column, u_column, value_column
from sequencer.report.lotsummary import label, reported_figures
from sequencer.report.plotstyle import (
    ACCENT,
    GREY,
    INK,
    SYMBOL,
    Plot,
    finish,
    new_figure,
    scale_for,
)

MAX_CURVES = 400  # an overlay of more curves shows a sample, evenly through the test order


def _sweeps(lot: Lot, row: int):
    """Programmed-order sweep readings of one device: (V, I, clamped) arrays, and spot ones."""
    pts = lot.curve(row)
    sweep = pts["step"].map(lot.step_kinds).eq("sweep").to_numpy()
    v, i = pts["voltage_V"].to_numpy(float), pts["current_A"].to_numpy(float)
    clamped = pts["in_compliance"].to_numpy(bool)
    return (v[sweep], i[sweep], clamped[sweep]), (v[~sweep], i[~sweep], clamped[~sweep])


def _limit_windows(ax, lot: Lot, scale: float, top: float) -> None:
    """IP window at VT, VL maximum, peak dissipation hyperbola, as the recipe states them."""
    s = lot.settings
    ip = lot.limit("regulated_current")
    if ip.min is not None or ip.max is not None:
        low = (ip.min if ip.min is not None else 0.0) * scale
        high = (ip.max * scale) if ip.max is not None else top
        half = s.slope_window_v / 2
        box = Rectangle(
            (s.test_voltage_v - half, low),
            2 * half,
            high - low,
            fill=False,
            edgecolor=INK,
            linewidth=1.4,
            label=f"IP limits at VT {s.test_voltage_v:g} V",
        )
        ax.add_patch(box)
    vl = lot.limit("limiting_voltage").max
    if vl is not None:
        ax.axvline(vl, color=INK, linestyle="--", linewidth=1.0, label=f"VL max {vl:g} V")
    pd_max = lot.limit("peak_dissipation").max
    right = ax.get_xlim()[1]
    if pd_max is not None and right > 0 and pd_max / right * scale < top:
        v = np.linspace(max(pd_max / (top / scale), 1e-3), right, 200)
        ax.plot(
            v,
            pd_max / v * scale,
            color=INK,
            linestyle=":",
            linewidth=1.0,
            label=f"dissipation max {format_si(pd_max, 'W')}",
        )


def _knee_reference(lot: Lot, ip: float) -> float:
    fixed = lot.settings.knee_reference_a()
    return fixed if fixed is not None else lot.settings.knee_fraction * ip


def _draw_lot(ax, lot: Lot, rows, scale: float, top: float) -> int:
    """Draw every curve; returns how many devices had clamped readings off the scale."""
    off_scale = 0
    final = lot.final.set_index("row")
    for passed in (False, True):
        colour, width = (ACCENT, 0.9) if passed else (GREY, 0.8)
        first = True
        for row in rows:
            if (final.at[row, "verdict"] == "pass") != passed:
                continue
            (v, i, clamped), (sv, si, _) = _sweeps(lot, row)
            shown = np.where(clamped, np.nan, i * scale)
            tag = ("pass" if passed else "not passed") if first else None
            ax.plot(v, shown, color=colour, linewidth=width, alpha=0.8, label=tag)
            ax.plot(sv, si * scale, ".", color=colour, markersize=2)
            first = False
            off_scale += bool((i[clamped] * scale > top).any())
            ax.plot(v[clamped], np.minimum(i[clamped] * scale, top), "x", color=GREY, ms=3)
    return off_scale


def _vl_marks(ax, lot: Lot, rows, scale: float) -> None:
    final = lot.final.set_index("row").loc[list(rows)]
    vl = final["limiting_voltage_V"].to_numpy(float)
    ip = final["regulated_current_A"].to_numpy(float)
    ref = np.array([_knee_reference(lot, x) for x in ip])
    ax.plot(
        vl,
        ref * scale,
        "o",
        mfc="white",
        mec=INK,
        ms=3.5,
        mew=0.8,
        label=f"VL (at {lot.settings.knee_fraction:g} x IP)",
    )


def _current_range(lot: Lot, rows, clamped: bool = False) -> tuple[float, float]:
    """Current axis: the readings (unclamped ones only, unless `clamped`) and the IP limit,
    with headroom; from 0 unless some reading is negative."""
    pts = lot.curves(rows)
    if not clamped:
        pts = pts[~pts["in_compliance"]]
    current = pts["current_A"].to_numpy(float)
    current = current[np.isfinite(current)]
    top = float(current.max(initial=0.0))
    ip_max = lot.limit("regulated_current").max
    top = 1.12 * max(top, ip_max or 0.0) or 1e-3
    return min(0.0, 1.12 * float(current.min(initial=0.0))), top


def _voltage_span(lot: Lot, rows) -> tuple[float, float]:
    """From 0 (or the lowest reading) to the highest level programmed or measured."""
    pts = lot.curves(rows)
    volts = np.r_[pts["voltage_V"].to_numpy(float), pts["level_V"].to_numpy(float)]
    volts = volts[np.isfinite(volts)]
    low, high = min(0.0, float(volts.min(initial=0.0))), float(volts.max(initial=1.0))
    pad = 0.03 * (high - low)
    return low - pad, high + pad


def _sample(rows: list[int]) -> list[int]:
    if len(rows) <= MAX_CURVES:
        return rows
    pick = np.linspace(0, len(rows) - 1, MAX_CURVES).round().astype(int)
    return [rows[k] for k in pick]


def iv_overlay(lot: Lot) -> Plot:
    rows = _sample(lot.final["row"].to_list())
    bottom_a, top_a = _current_range(lot, rows)
    scale, unit = scale_for(np.array([top_a]), "A")
    top = top_a * scale
    fig, (whole, knee) = new_figure(11, 4.6, cols=2)
    off = 0
    left, right = _voltage_span(lot, rows)
    vl = lot.limit("limiting_voltage").max
    knee_end = max(2 * (vl or 0.0), lot.settings.knee_voltage_v + lot.settings.knee_window)
    for ax in (whole, knee):
        off = _draw_lot(ax, lot, rows, scale, top)
        ax.set_ylim(bottom_a * scale, top)
        ax.set_xlim(left, right)
        ax.set_xlabel("voltage (V)")
        ax.set_ylabel(f"current ({unit})")
    knee.set_xlim(left if left < -0.03 * right else -0.03 * knee_end, knee_end)
    for ax in (whole, knee):
        _limit_windows(ax, lot, scale, top)
    _vl_marks(knee, lot, rows, scale)
    whole.set_title(f"I-V curves, lot {lot.name}")
    knee.set_title("knee region")
    knee.legend(loc="lower right")
    shown = f"{len(rows)} of {len(lot.final)}" if len(rows) < len(lot.final) else str(len(rows))
    note = f"{off} device(s) clamped at compliance above the scale (x at the top edge)"
    if off:
        whole.text(0.01, 0.99, note, transform=whole.transAxes, va="top", fontsize=8, color=INK)
    caption = (
        f"{shown} devices, last result each; passing devices in colour, others grey; readings "
        "at compliance marked x. The box is the regulated-current window over the slope "
        "window at the test voltage; impedance limits are in their histograms."
    )
    return finish(fig, "iv-lot", "I-V curves of the lot", caption)


def device_plot(lot: Lot, row: int) -> Plot:
    dev = lot.devices.set_index("row").loc[row]
    (v, i, clamped), (sv, si, sc) = _sweeps(lot, row)
    bottom_a, top_a = _current_range(lot, [row], clamped=True)
    scale, unit = scale_for(np.array([top_a]), "A")
    top = top_a * scale
    fig, (ax, words) = new_figure(10, 4.4, cols=2, ratios=(1.6, 1.0))
    ax.plot(
        v, np.where(clamped, np.nan, i * scale), "-o", color=ACCENT, ms=2.2, lw=1, label="sweep"
    )
    ax.plot(sv, si * scale, "s", color=INK, ms=3, mfc="none", label="spot readings")
    if clamped.any() or sc.any():
        ax.plot(
            np.r_[v[clamped], sv[sc]],
            np.minimum(np.r_[i[clamped], si[sc]] * scale, top),
            "x",
            color=GREY,
            ms=4,
            label="at compliance",
        )
    ax.set_ylim(bottom_a * scale, top)
    ax.set_xlim(*_voltage_span(lot, [row]))
    _limit_windows(ax, lot, scale, top)
    _device_marks(ax, lot, dev, scale)
    ax.set_xlabel("voltage (V)")
    ax.set_ylabel(f"current ({unit})")
    ax.set_title(f"{dev['device']}: {dev['verdict']}, bin {dev['hard_bin']} {dev['soft_bin']}")
    ax.legend(loc="lower right")
    words.axis("off")
    words.text(
        0,
        1,
        _device_text(lot, dev),
        va="top",
        fontsize=7.5,
        family="monospace",
        transform=words.transAxes,
    )
    name = f"device-{_file_part(str(dev['device']))}"
    if len(lot.runs) > 1:  # the same device may be in several runs
        name += f"-run{int(dev['run']) + 1}"
    caption = f"{dev['device']} (run folder {lot.runs['folder'][int(dev['run'])]})."
    return finish(fig, name, f"Device {dev['device']}", caption)


def _device_marks(ax, lot: Lot, dev, scale: float) -> None:
    s = lot.settings
    ip, vl = float(dev["regulated_current_A"]), float(dev["limiting_voltage_V"])
    zt = float(dev["dynamic_impedance_ohm"])
    if math.isfinite(ip):
        ax.plot([s.test_voltage_v], [ip * scale], "D", color=INK, ms=5, label="IP at VT")
        if math.isfinite(zt) and zt > 0:
            half = s.slope_window_v / 2
            x = np.array([s.test_voltage_v - half, s.test_voltage_v + half])
            y = (ip + (x - s.test_voltage_v) / zt) * scale
            ax.plot(x, y, color=INK, linewidth=2.2, alpha=0.6, label="ZT slope")
    if math.isfinite(vl) and math.isfinite(ip):
        ax.plot(
            [vl], [_knee_reference(lot, ip) * scale], "o", mfc="white", mec=INK, ms=5, label="VL"
        )


def _device_text(lot: Lot, dev) -> str:
    lines = []
    for figure in reported_figures(lot):
        unit = SYMBOL[FIGURE_UNIT[figure]]
        value, u = float(dev[value_column(figure)]), float(dev[u_column(figure)])
        bound = "≥ " if bool(dev[bound_column(figure)]) else ""
        shown = format_si(value, unit) if math.isfinite(value) else "—"
        spread = f" ± {format_si(u, unit, 2)}" if math.isfinite(u) else ""
        lines.append(f"{label(figure):<18} {bound}{shown}{spread}")
        limits = _limit_text(lot.limit(figure), unit)
        if limits:
            lines.append(f"{'':<18} limits {limits}")
    lines.append("(± is u, k = 1)")
    lines += ["", f"classification  {dev['classification']}"]
    for reason in str(dev["reasons"]).split("; "):
        if reason:
            lines.append(_wrap(reason, 46))
    return "\n".join(lines)


def _limit_text(limit, unit: str) -> str:
    low = format_si(limit.min, unit) if limit.min is not None else ""
    high = format_si(limit.max, unit) if limit.max is not None else ""
    if low and high:
        return f"{low} to {high}"
    return f"min {low}" if low else (f"max {high}" if high else "")


def _wrap(text: str, width: int) -> str:
    out, line = [], ""
    for word in text.split():
        if len(line) + len(word) + 1 > width:
            out.append(line)
            line = "  "
        line = f"{line} {word}" if line.strip() else f"{line}{word}"
    return "\n".join([*out, line])


def _file_part(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)
