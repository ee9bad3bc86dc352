"""How far a figure sits inside its limits, in a form read at a glance.

The margin is the distance to the nearer limit over a scale that suits the limit:
- both limits: the tolerance band (max - min), so 0 % is at a limit, 50 % at the middle of the
  band and nothing sane reaches above 50 %: "+12 % band" (of the band);
- a maximum only: the maximum, so 100 % is a value of zero: "+38 % max";
- a minimum only: the minimum; a value far above its minimum (an impedance of 9 x its floor)
  is said as a ratio, "9.1 x min", not "+808 % min".
Negative: beyond the limit, by that share ("-15 % band"). A lower bound ("at least") has a
margin to a minimum only. Screens and the HTML page show `margin_text`; `--json` gives the
share with the scale it is of (`margin_scale`).
"""

from __future__ import annotations

import math

import numpy as np

from sequencer.model.judgesettings import FigureLimit

RATIO_FROM = 1.0  # a minimum-only margin above 100 % of the minimum is shown as a ratio


def margins(value: np.ndarray, at_least: np.ndarray, limit: FigureLimit) -> np.ndarray:
    """Each value's margin as a share of its scale (NaN with no limit or no value)."""
    margin = np.full(value.shape, np.inf)
    scale = margin_scale(limit)
    if scale is None:
        return np.full(value.shape, np.nan)
    size = _scale_size(limit, scale)
    if limit.min is not None:
        margin = np.minimum(margin, (value - limit.min) / size)
    if limit.max is not None:
        above = (limit.max - value) / size
        margin = np.minimum(margin, np.where(at_least, np.inf, above))
    margin[~np.isfinite(value) | np.isinf(margin)] = np.nan
    return margin


def margin_scale(limit: FigureLimit) -> str | None:
    """'band', 'max' or 'min': what a margin is a share of (None: no limit)."""
    if limit.min is not None and limit.max is not None and limit.max > limit.min:
        return "band"
    if limit.max is not None and limit.min is None:
        return "max"
    if limit.min is not None:
        return "min"
    return None


def _scale_size(limit: FigureLimit, scale: str) -> float:
    if scale == "band":
        return float(limit.max - limit.min)  # type: ignore[operator]
    bound = limit.max if scale == "max" else limit.min
    return abs(float(bound)) or 1.0  # type: ignore[arg-type]


def margin_text(margin: float, limit: FigureLimit) -> str:
    """'+12 % of band', '-3.0 % of min', '9.1 x min'; '—' when there is none."""
    scale = margin_scale(limit)
    if scale is None or math.isnan(margin):
        return "—"
    if scale == "min" and margin > RATIO_FROM and limit.min:
        return f"{1 + margin:.1f} x min"
    digits = 1 if abs(margin) < 0.1 else 0
    return f"{100 * margin:+.{digits}f} % {scale}"
