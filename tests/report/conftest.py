"""Run folders for the report tests, written by the real store from curves judged by the real
judge under the demo recipe: fast (no simulator, no sockets) and in the store's own schema.

The curves come from a smooth made-up regulator shape (tanh knee, straight plateau of slope
1/ZT), not from physics: the reports only need curves the judge can read.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from sequencer.bench.lotrun import aborted
from sequencer.judge.engine import judge_curve, with_bin
from sequencer.model.curve import Curve
from sequencer.recipe.load import Recipe, load_recipe
from sequencer.store.runstore import RunStore

ROOT = Path(__file__).resolve().parents[2]
SWEEP_V = np.linspace(0.0, 40.0, 81)
SPOT_V, REPEATS, COMPLIANCE_A = 25.0, 5, 5e-3


@dataclass(frozen=True)
class Part:
    name: str
    ip_a: float = 1.8e-3
    zt_ohm: float = 300e3
    kind: str = "ok"  # ok, short, open, aborted


def demo_recipe() -> Recipe:
    return load_recipe(ROOT / "recipes" / "demo.yaml")


def curve_of(part: Part, channel: int, rng: np.random.Generator) -> Curve:
    levels = np.r_[SWEEP_V, np.full(REPEATS, SPOT_V)]
    segment = np.r_[np.zeros(len(SWEEP_V), int), np.ones(REPEATS, int)]
    current = (
        part.ip_a * np.tanh(levels / 0.9) * (1 + (levels - SPOT_V) / (part.ip_a * part.zt_ohm))
    )
    current = current + rng.normal(0, 2e-8, len(levels))
    volts = levels.copy()
    clamped = np.zeros(len(levels), bool)
    if part.kind == "short":
        clamped[1:] = True
        current[1:], volts[1:] = COMPLIANCE_A, 0.002
    elif part.kind == "open":
        current = rng.normal(0, 1e-11, len(levels))
    time_s = 0.004 * np.arange(1, len(levels) + 1)
    n = 12 if part.kind == "aborted" else len(levels)
    return Curve(
        part.name, channel, ("iv", "at-test-voltage"), ("sweep", "spot"), segment[:n],
        levels[:n], volts[:n], current[:n], time_s[:n], clamped[:n],
    )  # fmt: skip


def write_run(folder: Path, lot: str, parts: list[Part], started: str, seed: int = 1) -> Path:
    recipe = demo_recipe()
    manifest = {
        "started": started, "product": recipe.product, "lot": lot, "operator": "tester",
        "host": "bench-pc", "software_version": "0.1.0", "recipe_file": recipe.file,
        "recipe_sha256": recipe.digest, "recipe_text": recipe.text,
        "station": recipe.station.name, "station_text": recipe.station.text,
        "resource": "sim", "simulator": '{"seed": 1}',
    }  # fmt: skip
    store = RunStore.create(folder, manifest)
    rng = np.random.default_rng(seed)
    for channel, part in enumerate(parts, start=1):
        curve = curve_of(part, channel, rng)
        if part.kind == "aborted":
            judgement = with_bin(aborted(part.name, RuntimeError("link lost")), recipe.judge)
        else:
            judgement = judge_curve(curve, recipe.judge)
        store.add_device(curve, judgement)
    store.finish("completed", started.replace("T10", "T11"))
    return folder


def lot_parts(lot: str, n: int = 24, seed: int = 7) -> list[Part]:
    """A lot with spread: a short, an open, an aborted device, one in the guard band, one below
    the IP min, one whose ZT is only a lower bound."""
    rng = np.random.default_rng(seed)
    parts = [
        Part(f"{lot}-{k:03d}", float(rng.normal(1.8e-3, 0.07e-3)), float(rng.normal(300e3, 30e3)))
        for k in range(1, n + 1)
    ]
    parts[3] = Part(parts[3].name, kind="short")
    parts[7] = Part(parts[7].name, kind="open")
    parts[11] = Part(parts[11].name, ip_a=1.98e-3 - 1.5e-6)  # within U = 2u of the max
    parts[15] = Part(parts[15].name, ip_a=1.58e-3)  # below the min
    parts[19] = Part(parts[19].name, zt_ohm=1e13)  # a plateau flat within noise: ZT at least
    parts[-1] = Part(parts[-1].name, kind="aborted")
    return parts


@pytest.fixture(scope="session")
def lot_folder(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("lot") / "FK2611-07"
    return write_run(folder, "FK2611-07", lot_parts("FK2611-07"), "2026-11-02T10:00:00+00:00")


@pytest.fixture(scope="session")
def retest_folder(tmp_path_factory, lot_folder) -> Path:
    """A later run of the same lot that measures two devices again (now both in spec)."""
    first = lot_parts("FK2611-07")
    again = [Part(first[3].name, 1.75e-3), Part(first[7].name, 1.76e-3)]
    folder = tmp_path_factory.mktemp("retest") / "FK2611-07-retest"
    return write_run(folder, "FK2611-07", again, "2026-11-03T10:00:00+00:00", seed=2)
