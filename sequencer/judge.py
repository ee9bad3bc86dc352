"""The judge: figures of the trade from one device's curve, and a verdict. Pure numpy, no I/O.

Sign convention (REFERENCES.md): V = V(anode) - V(cathode), I > 0 from anode to cathode.
Points taken while the SMU was clamping at its compliance are never used for a figure; where a
figure would need them, the figure is missing and the reason says why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .curve import Curve
from .recipe import FIGURES, JudgeSettings

OPEN_CURRENT_A = 1e-6  # below this everywhere on the sweep, the device is taken as open
SHORT_VOLTAGE_V = 1.0  # compliance reached below this voltage means a short
SPOT_MATCH_V = 1e-3  # a spot belongs to the test voltage when programmed within this


@dataclass(frozen=True)
class Figure:
    """A figure with its standard uncertainty. `at_least` marks a lower bound: an impedance
    whose slope is within noise is reported as "at least", never as a made-up number."""

    value: float
    uncertainty: float = math.nan
    at_least: bool = False

    @property
    def known(self) -> bool:
        return not math.isnan(self.value)


MISSING = Figure(math.nan)


@dataclass(frozen=True)
class Judgement:
    device: str
    figures: dict[str, Figure]
    classification: str  # "ok", "open", "short", "compliance", "incomplete"
    reasons: tuple[str, ...] = field(default=())

    @property
    def verdict(self) -> str:
        """pass, fail, or aborted (the device was not measured to the end)."""
        if self.classification == "aborted":
            return "aborted"
        return "pass" if not self.reasons else "fail"


@dataclass(frozen=True)
class Slope:
    slope: float  # dI/dV, siemens
    stderr: float
    points: int


def fit_slope(voltage_v: np.ndarray, current_a: np.ndarray) -> Slope:
    """Least-squares line I = a + b V; b and its standard error (ordinary least squares)."""
    n = len(voltage_v)
    if n < 3:
        return Slope(math.nan, math.nan, n)
    v = voltage_v - voltage_v.mean()
    sxx = float(v @ v)
    if sxx == 0:
        return Slope(math.nan, math.nan, n)
    b = float(v @ (current_a - current_a.mean())) / sxx
    resid = current_a - current_a.mean() - b * v
    stderr = math.sqrt(float(resid @ resid) / (n - 2) / sxx)
    return Slope(b, stderr, n)


def impedance_from_slope(fit: Slope) -> Figure:
    """Z = dV/dI. A slope within two standard errors of zero gives only a lower bound."""
    if math.isnan(fit.slope):
        return MISSING
    if fit.slope > 2 * fit.stderr:
        return Figure(1.0 / fit.slope, fit.stderr / fit.slope**2)
    ceiling = fit.slope + 2 * fit.stderr
    if ceiling <= 0:
        return MISSING
    return Figure(1.0 / ceiling, math.nan, at_least=True)


def _sweep_points(curve: Curve) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    mask = curve.of_kind("sweep")
    v, i, c = curve.voltage_v[mask], curve.current_a[mask], curve.in_compliance[mask]
    order = np.argsort(v, kind="stable")
    return v[order], i[order], c[order]


def regulated_current(curve: Curve, settings: JudgeSettings) -> tuple[Figure, str]:
    vt = settings.test_voltage_v
    spot = curve.of_kind("spot") & (np.abs(curve.level_v - vt) <= SPOT_MATCH_V)
    if spot.any():
        good = spot & ~curve.in_compliance
        if not good.any():
            return MISSING, f"every reading at the test voltage {vt:g} V was in compliance"
        values = curve.current_a[good]
        spread = values.std(ddof=1) / math.sqrt(len(values)) if len(values) > 1 else math.nan
        return Figure(float(values.mean()), float(spread)), ""
    v, i, c = _sweep_points(curve)
    if len(v) < 2 or not (v[0] <= vt <= v[-1]):
        return MISSING, f"the sweep does not cover the test voltage {vt:g} V"
    near = np.argsort(np.abs(v - vt))[:2]
    if c[near].any():
        return MISSING, f"the sweep was in compliance at the test voltage {vt:g} V"
    return Figure(float(np.interp(vt, v[~c], i[~c]))), ""


def limiting_voltage(curve: Curve, reference_a: float) -> tuple[Figure, str]:
    """The lowest voltage at which the rising sweep current reaches the reference current."""
    v, i, c = _sweep_points(curve)
    v, i = v[~c], i[~c]
    above = np.nonzero(i >= reference_a)[0]
    if len(above) == 0:
        return MISSING, f"the current never reaches the knee reference {reference_a * 1e3:.4g} mA"
    k = int(above[0])
    if k == 0:
        return Figure(float(v[0])), ""
    frac = (reference_a - i[k - 1]) / (i[k] - i[k - 1])
    return Figure(float(v[k - 1] + frac * (v[k] - v[k - 1]))), ""


def impedance_at(curve: Curve, centre_v: float, window_v: float) -> tuple[Figure, str]:
    v, i, c = _sweep_points(curve)
    inside = np.abs(v - centre_v) <= window_v / 2 + 1e-12
    if (inside & c).any():
        return MISSING, f"the sweep was in compliance within the window around {centre_v:g} V"
    fit = fit_slope(v[inside], i[inside])
    if fit.points < 3:
        return MISSING, f"fewer than 3 sweep points within {window_v:g} V around {centre_v:g} V"
    return impedance_from_slope(fit), ""


def classify(curve: Curve) -> tuple[str, str]:
    v, i, c = _sweep_points(curve)
    if len(v) == 0:
        v, i, c = curve.voltage_v, curve.current_a, curve.in_compliance
    if c.any() and float(np.min(np.abs(v[c]))) < SHORT_VOLTAGE_V:
        at = float(np.min(np.abs(v[c])))
        return "short", f"short: compliance reached at {at:.3g} V"
    if len(i) and float(np.max(np.abs(i))) < OPEN_CURRENT_A:
        return "open", f"open: no current above {OPEN_CURRENT_A * 1e6:g} µA anywhere"
    return "ok", ""


def judge_curve(curve: Curve, settings: JudgeSettings) -> Judgement:
    """All figures of one device and the verdict against the settings' limits."""
    kind, why = classify(curve)
    if kind != "ok":
        return Judgement(curve.device, dict.fromkeys(FIGURES, MISSING), kind, (why,))
    reasons: list[str] = []
    ip, why_ip = regulated_current(curve, settings)
    reference = settings.knee_current_a or settings.knee_fraction * ip.value
    vl, why_vl = limiting_voltage(curve, reference) if not math.isnan(reference) else (MISSING, "")
    zt, why_zt = impedance_at(curve, settings.test_voltage_v, settings.slope_window_v)
    zk, why_zk = impedance_at(curve, settings.knee_voltage_v, settings.slope_window_v)
    figures = {
        "regulated_current": ip,
        "limiting_voltage": vl,
        "dynamic_impedance": zt,
        "knee_impedance": zk,
    }
    reasons.extend(w for w in (why_ip, why_vl, why_zt, why_zk) if w)
    reasons.extend(limit_reasons(figures, settings))
    incomplete = any(w for w in (why_ip, why_vl, why_zt, why_zk))
    return Judgement(curve.device, figures, "incomplete" if incomplete else "ok", tuple(reasons))


LABELS = {
    "regulated_current": ("regulated current", "A"),
    "limiting_voltage": ("limiting voltage", "V"),
    "dynamic_impedance": ("dynamic impedance", "Ω"),
    "knee_impedance": ("knee impedance", "Ω"),
}


def limit_reasons(figures: dict[str, Figure], settings: JudgeSettings) -> list[str]:
    from .units import format_si  # keeps this module's import list to what the math needs

    out = []
    for name, fig in figures.items():
        limit = settings.limit(name)
        label, unit = LABELS[name]
        if not fig.known:
            continue
        # A lower bound passes a minimum it already exceeds; below a minimum, or against a
        # maximum, it proves nothing, and an unproven figure does not pass.
        shown = format_si(fig.value, unit)
        if fig.at_least and (
            limit.max is not None or (limit.min is not None and fig.value < limit.min)
        ):
            out.append(f"{label} only known as at least {shown}, within the noise")
        elif limit.min is not None and fig.value < limit.min:
            out.append(f"{label} {shown} below min {format_si(limit.min, unit)}")
        elif limit.max is not None and fig.value > limit.max:
            out.append(f"{label} {shown} above max {format_si(limit.max, unit)}")
    return out
