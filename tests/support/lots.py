"""Shared pieces of the speed tests: recipes written from the demo's, the simulated lot reached
in process through the real driver, and a smooth regulator-like curve for the pure search."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np

from instruments.dialect import load_dialect
from instruments.loopback import CallableTransport
from instruments.scpi import message_units
from instruments.smu import ScpiSmu
from sequencer.bench.lotrun import device_name, make_guard
from sequencer.judge.engine import Judgement, judge_curve
from sequencer.plan.make import make_plan
from sequencer.recipe.load import Recipe, load_recipe
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder
from simulator.options import SimOptions, build_instrument
from simulator.session import Session
from simulator.smu_model import noiseless  # noqa: F401 - the speed tests import it from here

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "recipes" / "demo.yaml"
PRODUCTION = ROOT / "recipes" / "demo-production.yaml"


def recipes() -> tuple[Recipe, Recipe]:
    return load_recipe(DEMO), load_recipe(PRODUCTION)


def lot_smu(
    recipe: Recipe, devices: int, *, sent: list[str] | None = None, defect_rate: float | None = None
):
    """(instrument, driver) for the demo station's simulated lot, on the virtual clock."""
    options = dict(recipe.station.simulator_options)
    if defect_rate is not None:
        options["defect_rate"] = defect_rate
    inst = build_instrument(
        SimOptions(seed=int(options["seed"]), devices=devices, preset=str(options["preset"]),
                   spread=float(options["spread"]), defect_rate=float(options["defect_rate"]),
                   clock="virtual")
    )  # fmt: skip
    session = Session(inst)

    def handle(message: str) -> str | None:
        if sent is not None:
            sent.extend(message_units(message))  # command by command
        return session.handle(message)

    return inst, ScpiSmu(CallableTransport(handle, "sim-in-process"), load_dialect("scpi1999"))


def measure_lot(
    recipe: Recipe, devices: int, defect_rate: float | None = None
) -> tuple[list[Judgement], list]:
    """Every device of a fresh simulated lot measured and judged; (judgements, curves)."""
    _, smu = lot_smu(recipe, devices, defect_rate=defect_rate)
    plan = dataclasses.replace(make_plan(recipe), channels=tuple(range(1, devices + 1)))
    guard = make_guard(recipe, smu)
    judgements, curves = [], []
    for channel in plan.channels:
        recorder = Recorder()
        measure_device(smu, plan, channel, guard, recorder)
        curve = recorder.curve(device_name(recipe.lot, channel), channel, plan)
        curves.append(curve)
        judgements.append(judge_curve(curve, recipe.judge))
    return judgements, curves


def regulator_current(volts, ip: float = 1.8e-3, knee_v: float = 1.1) -> np.ndarray:
    """A smooth rising-then-flat curve (no physics: the judge's accuracy is checked in
    tests/reference), strictly increasing, 0 at 0 V."""
    v = np.asarray(volts, float)
    return ip * np.tanh(v / knee_v) ** 2 * (1 + v / 400.0)
