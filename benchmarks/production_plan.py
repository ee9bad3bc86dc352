"""Instrument time per device, full 81-point sweep (recipes/demo.yaml) against the production
plan (recipes/demo-production.yaml), on one simulated lot of 1,000 devices, same aperture,
virtual clock; and whether the two plans give the same figures and verdicts.

    python benchmarks/production_plan.py [--devices N] [--seed S]

The simulated SMU runs in process behind instruments.loopback.CallableTransport (the same SCPI
text through the same driver, no socket) on the virtual clock, so its busy time (what
SIMulation:BUSY? answers: settling, apertures and the modelled cost of every command) is the
instrument time, and nothing sleeps. Both plans run their fixed levels as instrument-side
lists (`lists: true`), so the full sweep is not slowed by per-point commands. Every curve is
judged by the recipe's judge.

The figures are compared twice. First with the simulator's reading noise switched off (in this
process only): what is left is the plans' own difference (VL interpolated on other levels, ZT
from other points of the window), and every device must agree within the tolerance (IP 0.1 %,
VL 2 %, ZT 5 %). Then with the noise the demo station has: a ZT from a 4 V window at 0.1 NPLC
scatters by about 1 to 2 % per device in either plan, so the full plan is also measured a
second time; the production plan should agree with it within tolerance on about as many
devices as the full plan agrees with its own repeat. Verdicts and bins must not differ more
often than between the two full sweeps.

Printed: instrument milliseconds per device of each plan (aperture, settling and commands
apart), their ratio, the ratio had the production plan settled 1 ms per reading like the
sweep, and the comparisons. Target: at least 10x fewer instrument-seconds.
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from instruments.dialect import load_dialect  # noqa: E402
from instruments.loopback import CallableTransport  # noqa: E402
from instruments.smu import ScpiSmu  # noqa: E402
from sequencer.bench.lotrun import device_name, make_guard  # noqa: E402
from sequencer.judge.engine import Judgement, judge_curve  # noqa: E402
from sequencer.plan.make import make_plan  # noqa: E402
from sequencer.plan.segments import Plan  # noqa: E402
from sequencer.recipe.load import Recipe, load_recipe  # noqa: E402
from sequencer.run.device import measure_device  # noqa: E402
from sequencer.run.recorder import Recorder  # noqa: E402
from simulator import smu_model  # noqa: E402
from simulator.options import SimOptions, build_instrument  # noqa: E402
from simulator.session import Session  # noqa: E402

TOLERANCE = {"regulated_current": 0.001, "limiting_voltage": 0.02, "dynamic_impedance": 0.05}
SHORT = {"regulated_current": "IP", "limiting_voltage": "VL", "dynamic_impedance": "ZT"}
TARGET_RATIO = 10.0
SWEEP_SETTLE_S = 1e-3  # the full sweep's settling per point (recipes/demo.yaml)


@dataclasses.dataclass
class Measured:
    plan: Plan
    judgements: list[Judgement]
    busy_s: np.ndarray  # instrument seconds, per device
    segments: list[np.ndarray]  # segment index of every reading, per device

    @property
    def readings(self) -> float:
        return float(np.mean([len(s) for s in self.segments]))

    def parts_ms(self) -> tuple[float, float]:
        """(aperture, settling) in ms per device: each reading's aperture and its settling."""
        settle = sum(
            seg.settle_s * np.mean([np.count_nonzero(s == j) for s in self.segments])
            for j, seg in enumerate(self.plan.segments)
        )
        return 1e3 * self.readings * self.plan.aperture_s, 1e3 * float(settle)


class Bench:
    """A simulated lot on the virtual clock, reached in process through the real driver."""

    def __init__(self, recipe: Recipe, devices: int, seed: int) -> None:
        options = recipe.station.simulator_options
        self.instrument = build_instrument(
            SimOptions(
                seed=seed,
                devices=devices,
                preset=str(options.get("preset", "FLC-1.8")),
                spread=float(options.get("spread", 1.0)),
                defect_rate=float(options.get("defect_rate", 0.0)),
                clock="virtual",
            )
        )
        transport = CallableTransport(Session(self.instrument).handle, "sim-in-process")
        self.smu = ScpiSmu(transport, load_dialect("scpi1999"))
        self.smu.identify()
        self.channels = tuple(range(1, devices + 1))

    def measure(self, recipe: Recipe) -> Measured:
        plan = dataclasses.replace(make_plan(recipe), channels=self.channels)
        guard = make_guard(recipe, self.smu)
        clock = self.instrument.clock
        judgements, busy, segments = [], [], []
        for channel in self.channels:
            recorder = Recorder()
            before = clock.busy_s
            measure_device(self.smu, plan, channel, guard, recorder)
            busy.append(clock.busy_s - before)
            curve = recorder.curve(device_name(recipe.lot, channel), channel, plan)
            segments.append(curve.segment)
            judgements.append(judge_curve(curve, recipe.judge))
        return Measured(plan, judgements, np.array(busy), segments)


def differences(a: list[Judgement], b: list[Judgement], figure: str) -> np.ndarray:
    va = np.array([j.figures[figure].value for j in a])
    vb = np.array([j.figures[figure].value for j in b])
    both = np.isfinite(va) & np.isfinite(vb)
    return vb[both] / va[both] - 1.0


def differing(a: list[Judgement], b: list[Judgement]) -> list[tuple[Judgement, Judgement]]:
    return [
        (x, y)
        for x, y in zip(a, b, strict=True)
        if (x.verdict, x.hard_bin, x.soft_bin) != (y.verdict, y.hard_bin, y.soft_bin)
    ]


def time_report(full: Measured, prod: Measured) -> bool:
    print(
        f"{'plan':<22}{'instrument ms/device':>21}{'aperture':>10}{'settling':>10}"
        f"{'commands':>10}{'readings':>10}"
    )
    totals = []
    for label, m in (("full 81-point sweep", full), ("production plan", prod)):
        aperture, settle = m.parts_ms()
        total = 1e3 * float(m.busy_s.mean())
        totals.append(total)
        print(
            f"{label:<22}{total:>21.2f}{aperture:>10.2f}{settle:>10.2f}"
            f"{total - aperture - settle:>10.2f}{m.readings:>10.2f}"
        )
    ratio = totals[0] / totals[1]
    print(f"ratio full / production: {ratio:.1f}x  (target >= {TARGET_RATIO:g}x: {_met(ratio)})")
    extra = 1e3 * prod.readings * (SWEEP_SETTLE_S - prod.plan.segments[0].settle_s)
    slower = totals[1] + extra
    print(
        f"had the production plan settled {1e3 * SWEEP_SETTLE_S:g} ms per reading like the "
        f"sweep: {slower:.2f} ms, ratio {totals[0] / slower:.1f}x"
    )
    return ratio >= TARGET_RATIO


def _met(ratio: float) -> str:
    return "met" if ratio >= TARGET_RATIO else "NOT met"


def noiseless_report(full: list[Judgement], prod: list[Judgement]) -> bool:
    print("\nwithout reading noise: production against full, every device")
    print(f"{'figure':<8}{'tolerance':>10}{'median':>10}{'max':>9}{'within':>9}{'devices':>9}")
    ok = True
    for figure, tol in TOLERANCE.items():
        d = differences(full, prod, figure)
        within = bool(np.all(np.abs(d) <= tol))
        ok &= within
        print(
            f"{SHORT[figure]:<8}{100 * tol:>9.1f}%{100 * np.median(d):>+9.3f}%"
            f"{100 * np.max(np.abs(d)):>8.3f}%{'all' if within else 'NOT all':>9}{d.size:>9}"
        )
    changed = differing(full, prod)
    print(f"verdict or bin differs: {len(changed)} of {len(full)} devices")
    return ok and not changed


def noisy_report(full: list[Judgement], repeat: list[Judgement], prod: list[Judgement]) -> bool:
    print("\nwith the station's reading noise: production against full | full against its repeat")
    print(
        f"{'figure':<8}{'tolerance':>10}{'median':>10}{'p99':>8}{'max':>8}{'within':>9}"
        f"   |{'p99':>8}{'max':>8}{'within':>9}"
    )
    for figure, tol in TOLERANCE.items():
        d, r = differences(full, prod, figure), differences(full, repeat, figure)
        print(
            f"{SHORT[figure]:<8}{100 * tol:>9.1f}%{100 * np.median(d):>+9.3f}%"
            f"{_pct(np.percentile(np.abs(d), 99))}{_pct(np.max(np.abs(d)))}"
            f"{100 * np.mean(np.abs(d) <= tol):>8.1f}%   |"
            f"{_pct(np.percentile(np.abs(r), 99))}{_pct(np.max(np.abs(r)))}"
            f"{100 * np.mean(np.abs(r) <= tol):>8.1f}%"
        )
    changed, own = differing(full, prod), differing(full, repeat)
    print(
        f"verdict or bin differs from the first full sweep: production {len(changed)}, "
        f"the repeated full sweep {len(own)} of {len(full)} devices"
    )
    for a, b in changed[:8]:
        print(f"  {a.device}: full {a.verdict} {a.soft_bin!r}; production {b.verdict} "
              f"{b.soft_bin!r}")  # fmt: skip
    return len(changed) <= len(own)


def _pct(x: float) -> str:
    return f"{100 * x:>7.3f}%"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=2611)
    args = parser.parse_args()
    # The full sweep as an instrument-side list too, so that it is not slowed by commands.
    full_recipe = dataclasses.replace(load_recipe(ROOT / "recipes" / "demo.yaml"), lists=True)
    prod_recipe = load_recipe(ROOT / "recipes" / "demo-production.yaml")
    print(f"lot: {args.devices} simulated FLC-1.8 devices (seed {args.seed}), virtual clock\n")
    t0 = time.perf_counter()
    with smu_model.noiseless():
        bench = Bench(full_recipe, args.devices, args.seed)
        quiet = bench.measure(full_recipe), bench.measure(prod_recipe)
    bench = Bench(full_recipe, args.devices, args.seed)
    full, repeat, prod = (bench.measure(r) for r in (full_recipe, full_recipe, prod_recipe))
    wall = time.perf_counter() - t0
    ratio_ok = time_report(full, prod)
    method_ok = noiseless_report(quiet[0].judgements, quiet[1].judgements)
    noisy_ok = noisy_report(full.judgements, repeat.judgements, prod.judgements)
    print(f"\n(5 passes over the lot measured and judged in {wall:.0f} s of wall time)")
    met = ratio_ok and method_ok and noisy_ok
    print(f"targets: {'met' if met else 'NOT met'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
