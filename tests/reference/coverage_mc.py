"""Monte Carlo coverage of the judge's expanded uncertainty U [src: JCGM 101:2008 (GUM
Supplement 1), propagation of distributions by random draws].

For each condition (device kind, grid, noise) the same error-free curve is measured many times,
each trial with its own instrument errors drawn within the station's specification (per range a
gain and an offset, rectangular over +/- the stated limit, as the judge's accuracy tables read
them [JCGM 100:2008 4.3.7]) and its own Gaussian reading noise. A figure is covered in a trial
when |value - true| <= U. The true values are those of the error-free device:
- IP: the device's current at the test voltage;
- VL: the voltage at which the device's current first reaches 0.8 x the true IP (solved on the
  device's own function, not on the grid);
- ZT, ZK: the judge's measurand is the DC slope over its window, so the true value is
  1 / (least-squares slope of the error-free currents at the programmed levels of the window).

Device kinds are self-biased JFETs in the textbook square law with channel-length modulation
[src: Sedra & Smith; Boylestad & Nashelsky; REFERENCES.md s2], evaluated by tests/support/
textbook.py (scipy's brentq). All trials of a condition are judged at once as rows of one lot.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from sequencer.judge.engine import judge_arrays
from sequencer.judge.figures import Layout
from sequencer.model.accuracy import DEFAULT_ACCURACY, AccuracyTable
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import JudgeSettings
from tests.support.textbook import self_biased_current

FIGURES = ("regulated_current", "limiting_voltage", "dynamic_impedance", "knee_impedance")
SHORT = {
    "regulated_current": "IP",
    "limiting_voltage": "VL",
    "dynamic_impedance": "ZT",
    "knee_impedance": "ZK",
}
# Device kinds (idss A, vp V, lambda 1/V, rs ohm): invented round values spanning 0.3 to 9 mA.
KINDS = {
    "jfet 1k (1.8 mA)": (10e-3, -3.0, 0.01, 1000.0),
    "jfet 3k3 (0.3 mA)": (2e-3, -2.0, 0.02, 3300.0),
    "jfet 47R (9 mA)": (12e-3, -4.0, 0.005, 47.0),
}
GRIDS = (0.25, 0.5, 1.0)
NOISES = (30e-9, 300e-9)
STOP_V = 30.0


@dataclass(frozen=True)
class Condition:
    kind: str
    grid_v: float
    noise_a: float

    def label(self) -> str:
        return f"{self.kind:18s} grid {self.grid_v:4.2f} V noise {self.noise_a * 1e9:3.0f} nA"


def conditions(kinds=KINDS, grids=GRIDS, noises=NOISES) -> list[Condition]:
    return [Condition(k, g, n) for k in kinds for g in grids for n in noises]


def _draw_errors(table: AccuracyTable, readings: np.ndarray, rng: np.random.Generator):
    """readings (n, m) with each trial's own gain and offset per range, drawn rectangular."""
    full, gain, offset = table.arrays()
    n = readings.shape[0]
    g = rng.uniform(-1, 1, (n, full.size)) * gain
    o = rng.uniform(-1, 1, (n, full.size)) * offset
    k = table.range_index(readings)
    rows = np.arange(n)[:, None]
    return readings * (1 + g[rows, k]) + o[rows, k]


def true_figures(kind: str, s: JudgeSettings, levels: np.ndarray) -> dict[str, float]:
    idss, vp, lam, rs = KINDS[kind]

    def current(v: float) -> float:
        return self_biased_current(v, idss, vp, lam, rs)

    ip = current(s.test_voltage_v)
    ref = s.knee_fraction * ip
    vl = brentq(lambda v: current(v) - ref, 1e-6, s.test_voltage_v, xtol=1e-12)

    def window_z(centre: float, width: float) -> float:
        x = levels[np.abs(levels - centre) <= width / 2 + 1e-9]
        y = np.array([current(float(v)) for v in x])
        return 1.0 / np.polyfit(x, y, 1)[0]

    return {
        "regulated_current": ip,
        "limiting_voltage": vl,
        "dynamic_impedance": window_z(s.test_voltage_v, s.slope_window_v),
        "knee_impedance": window_z(s.knee_voltage_v, s.knee_window),
    }


def coverage(c: Condition, trials: int, seed: int, s: JudgeSettings | None = None) -> dict:
    """Fraction of trials whose U covers the true value, per figure (and the median U / u)."""
    s = s or JudgeSettings()
    idss, vp, lam, rs = KINDS[c.kind]
    levels = np.round(np.arange(0.0, STOP_V + c.grid_v / 2, c.grid_v), 9)
    exact = np.array([self_biased_current(float(v), idss, vp, lam, rs) for v in levels])
    truth = true_figures(c.kind, s, levels)
    rng = np.random.default_rng(seed)
    shape = (trials, levels.size)
    current = exact[None, :] + rng.normal(0.0, c.noise_a, shape)
    current = _draw_errors(DEFAULT_ACCURACY.current, current, rng)
    voltage = _draw_errors(DEFAULT_ACCURACY.voltage, np.broadcast_to(levels, shape), rng)
    layout = Layout.of(Curve.from_sweep("mc", levels, exact))
    lot = judge_arrays(layout, voltage, current, np.zeros(shape, bool), s)
    out = {}
    for name in FIGURES:
        value, big_u = lot.figures.value[name], lot.figures.expanded(name)
        hit = np.abs(value - truth[name]) <= big_u  # NaN (no figure, no U): not covered
        # An "at least" figure claims only a lower bound: covered when the bound holds.
        bound = lot.figures.at_least[name]
        hit = np.where(bound, value <= truth[name], hit)
        out[name] = float(np.mean(hit))
    return out


def band(trials: int, p: float = 0.95, level: float = 0.99) -> tuple[float, float]:
    """The binomial `level` interval of the covered fraction when the true coverage is p
    [src: scipy.stats.binom]."""
    from scipy.stats import binom

    low, high = binom.interval(level, trials, p)
    return low / trials, high / trials


def table(trials: int = 1000, seed: int = 1) -> str:
    lines = [f"{'condition':44s} " + " ".join(f"{SHORT[n]:>6s}" for n in FIGURES)]
    for index, c in enumerate(conditions()):
        cov = coverage(c, trials, seed + index)
        lines.append(f"{c.label():44s} " + " ".join(f"{cov[n]:6.3f}" for n in FIGURES))
    return "\n".join(lines)


if __name__ == "__main__":
    print(table())
    print("99 % binomial band for 1000 trials:", band(1000))
