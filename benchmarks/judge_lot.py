"""How fast the judge decides a whole lot: 100,000 curves of 200 points as 2-D arrays, against
a per-curve Python loop of the same judge (`judge_curve`), timed on a subset and scaled.

Not a timed test; run it by hand: `python benchmarks/judge_lot.py [--devices N]`.
The curves are a smooth stand-in for a regulator (no physics: the judge's accuracy is checked
in tests/reference against ngspice), with seeded spread, 30 nA of reading noise and a few
opens, shorts and compliance-limited parts.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from sequencer.judge.engine import judge_arrays, judge_curve
from sequencer.judge.figures import Layout
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import BinRule, FigureLimit, FigureRange, JudgeSettings

POINTS = 200
COMPLIANCE_A = 5e-3


def lot(devices: int, seed: int = 2611) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(voltage, current, clamped), each (devices, POINTS)."""
    rng = np.random.default_rng(seed)
    levels = np.linspace(0.0, 40.0, POINTS)
    ip = rng.normal(1.8e-3, 0.06e-3, (devices, 1))
    knee = rng.normal(1.1, 0.05, (devices, 1))
    z = rng.normal(300e3, 30e3, (devices, 1))
    current = ip * np.tanh(levels / knee) ** 2 * (1 + (levels - 25.0) / (ip * z))
    current = current + rng.normal(0.0, 30e-9, current.shape)
    kind = rng.random(devices)
    current[kind < 0.01] = rng.normal(0.0, 30e-9, (int((kind < 0.01).sum()), POINTS))  # open
    current[(kind >= 0.01) & (kind < 0.02)] = levels / 20.0  # a short: 20 ohm
    current[(kind >= 0.02) & (kind < 0.03)] *= 3.0  # too much current: clamps at compliance
    clamped = current >= COMPLIANCE_A
    voltage = np.broadcast_to(levels, current.shape).copy()
    # While clamped the SMU holds the current and the voltage falls to what the part needs.
    voltage[clamped] = np.minimum(voltage[clamped], 2.0)
    current[clamped] = COMPLIANCE_A
    return voltage, current, clamped


def settings() -> JudgeSettings:
    grades = [
        BinRule(1, "pass", f"IP-{grade}", ranges=(FigureRange("regulated_current", low, high),))
        for grade, low, high in (("A", 1.62e-3, 1.74e-3), ("B", 1.74e-3, 1.86e-3))
    ]
    bins = (
        *grades,
        BinRule(1, "pass", "IP-C"),
        BinRule(2, "fail", "guard band", ("guard-band",)),
        BinRule(3, "fail", "", (), ("open", "short")),
        BinRule(4, "fail"),
    )
    limits = (
        FigureLimit("regulated_current", 1.62e-3, 1.98e-3),
        FigureLimit("limiting_voltage", None, 3.5),
        FigureLimit("dynamic_impedance", 100e3, None),
        FigureLimit("knee_impedance", 20e3, None),
    )
    return JudgeSettings(limits=limits, decision="guarded", bins=bins)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--devices", type=int, default=100_000)
    parser.add_argument("--loop", type=int, default=2_000, help="curves timed in the loop")
    args = parser.parse_args()
    s = settings()
    voltage, current, clamped = lot(args.devices)
    levels = voltage[0].copy()
    levels[:] = np.linspace(0.0, 40.0, POINTS)
    layout = Layout(("sweep",), np.zeros(POINTS, int), levels)

    t0 = time.perf_counter()
    result = judge_arrays(layout, voltage, current, clamped, s)
    t_lot = time.perf_counter() - t0

    subset = min(args.loop, args.devices)
    curves = [
        Curve(
            "d",
            0,
            ("sweep",),
            ("sweep",),
            layout.segment,
            levels,
            voltage[k],
            current[k],
            np.zeros(POINTS),
            clamped[k],
        )
        for k in range(subset)
    ]
    t0 = time.perf_counter()
    looped = [judge_curve(c, s) for c in curves]
    t_loop = (time.perf_counter() - t0) * args.devices / subset

    verdicts, hard_bins = result.verdicts(), result.hard_bins()
    same = all((j.verdict, j.hard_bin) == (verdicts[k], hard_bins[k]) for k, j in enumerate(looped))
    counts = {v: verdicts.count(v) for v in ("pass", "fail", "guard-band")}
    print(
        f"lot: {args.devices} curves x {POINTS} points judged as arrays in {t_lot:.2f} s "
        f"({1e6 * t_lot / args.devices:.1f} µs a curve); verdicts {counts}"
    )
    print(
        f"loop: judge_curve on the first {subset} curves, scaled to {args.devices}: {t_loop:.1f} s"
    )
    print(f"ratio loop / lot: {t_loop / t_lot:.0f}x; same verdicts and bins on the subset: {same}")
    print(f"target: under 2 s for the lot -> {'met' if t_lot < 2.0 else 'NOT met'}")


if __name__ == "__main__":
    main()
