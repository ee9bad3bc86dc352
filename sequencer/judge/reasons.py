"""The words of the judge: why a device is what it is. Each reason comes as (kind, text); the
kind ("regulated current below min") is what a soft bin and a lot summary count."""

from __future__ import annotations

import math

from sequencer.judge import decide
from sequencer.judge import figures as fig
from sequencer.model.judgesettings import FIGURE_INFO, SHAPES, FigureLimit, JudgeSettings
from sequencer.model.units import format_si

Reason = tuple[str, str]
SYMBOL = {"A": "A", "V": "V", "ohm": "Ω", "W": "W"}


def label(figure: str) -> str:
    return FIGURE_INFO[figure][2]


def show(figure: str, value: float) -> str:
    return format_si(value, SYMBOL[FIGURE_INFO[figure][1]])


def shape_reason(code: int, number: float, s: JudgeSettings) -> Reason:
    kind = SHAPES[code]
    if kind == "open":
        text = f"open: no forward current above {format_si(s.shape.open_below_a, 'A')} anywhere"
    elif kind == "short":
        text = f"short: compliance reached at {number:.3g} V"
    elif kind == "compliance-limited":
        text = f"compliance-limited: clamped at the compliance from {number:g} V (programmed)"
    elif kind == "oscillating":
        text = (
            f"oscillating: reading scatter {100 * number:.2g} % of the current "
            f"(at most {100 * s.shape.scatter_limit:g} % expected)"
        )
    else:
        text = (
            f"non-monotonic: the current falls by {format_si(number, 'A')} as the voltage "
            f"rises (at most {100 * s.shape.drop_limit:g} % of its peak allowed)"
        )
    return kind, text


def _where(figure: str, s: JudgeSettings) -> tuple[float, float]:
    """The voltage a figure is taken at, and its slope window (0 where none)."""
    return {
        "regulated_current": (s.test_voltage_v, s.slope_window_v),
        "dynamic_impedance": (s.test_voltage_v, s.slope_window_v),
        "knee_impedance": (s.knee_voltage_v, s.knee_window),
        "reverse_current": (s.reverse_voltage_v or math.nan, 0.0),
        "peak_current": (s.peak_voltage_v or math.nan, 0.0),
        "peak_dissipation": (s.peak_voltage_v or math.nan, 0.0),
    }.get(figure, (math.nan, 0.0))


def missing_reason(figure: str, code: int, s: JudgeSettings, reference_a: float) -> Reason:
    name = label(figure)
    volts, window = _where(figure, s)
    ref = format_si(reference_a, "A")
    texts = {
        fig.MISS_UNCOVERED: (
            "there is no forward sweep"
            if figure == "limiting_voltage"
            else f"nothing was programmed at {volts:g} V"
            if not window
            else f"the sweep does not cover {volts:g} V"
            + (" and no spot is programmed there" if figure == "regulated_current" else "")
        ),
        fig.MISS_COMPLIANCE: (
            "a reading next to the knee was clamped at compliance"
            if figure == "limiting_voltage"
            else f"clamped at compliance within {window:g} V around {volts:g} V"
        ),
        fig.MISS_FEW: f"fewer than 3 usable sweep points within {window:g} V around {volts:g} V",
        fig.MISS_NO_IP: "no regulated current to take the knee reference from",
        fig.MISS_NEVER: f"the current never reaches the knee reference {ref}",
        fig.MISS_FIRST: f"the current exceeds the knee reference {ref} at the first point",
        fig.MISS_NEGATIVE: f"the slope around {volts:g} V is negative beyond its noise",
        fig.MISS_NONFINITE: f"no finite reading at {volts:g} V",
    }
    return f"{name} missing", f"{name} missing: {texts[code]}"


def limit_reason(
    figure: str, status: int, value: float, limit: FigureLimit, big_u: float, at_least: bool
) -> tuple[str, str, bool]:
    """(kind, text, in_guard_band) for a figure outside its acceptance zone."""
    name, shown = label(figure), show(figure, value)
    low = show(figure, limit.min) if limit.min is not None else ""
    high = show(figure, limit.max) if limit.max is not None else ""
    if status == decide.BELOW:
        return f"{name} below min", f"{name} {shown} below min {low}", False
    if status == decide.ABOVE:
        bound = "at least " if at_least else ""
        return f"{name} above max", f"{name} {bound}{shown} above max {high}", False
    if status == decide.UNPROVEN:
        below = limit.min is not None and value < limit.min
        side = f", below min {low}" if below else f"; that cannot show it is at most {high}"
        return f"{name} unproven", f"{name} only known as at least {shown}{side}", False
    u_text = "unknown" if math.isinf(big_u) else show(figure, big_u)
    if status == decide.GUARD_LOW:
        bound = "" if math.isinf(big_u) else f"; accepted from {show(figure, limit.min + big_u)}"
        text = f"{name} {shown} in the guard band above min {low} (U = {u_text}{bound})"
    else:
        bound = "" if math.isinf(big_u) else f"; accepted up to {show(figure, limit.max - big_u)}"
        text = f"{name} {shown} in the guard band below max {high} (U = {u_text}{bound})"
    return f"{name} in guard band", text, True
