"""A small simulated station and recipe, written as files, for part-by-part and shared-store
tests."""

from __future__ import annotations

from pathlib import Path

STATION = """\
station: {name}
instrument: {{resource: sim, timeout: 5 s}}
tray: {{channels: 1-{channels}}}
limits: {{max_voltage: 60 V, max_current: 20 mA, max_power: 250 mW}}
fixture: {{interlocked: true}}
simulator: {{seed: {seed}, preset: FLC-1.8, spread: 0.3, defect_rate: 0, clock: {clock}}}
{extra}"""

RECIPE = """\
product: FLC-1.8 current limiter, 1.8 mA nominal
lot: {lot}
station: {station}
nplc: 0.1
steps:
  - sweep: {{name: iv, start: 0 V, stop: 40 V, points: {points}, compliance: 5 mA}}
  - spot: {{name: at-test-voltage, voltage: 25 V, compliance: 5 mA, repeats: 3}}
judge:
  test_voltage: 25 V
  knee_voltage: 6 V
  slope_window: 4 V
  limits:
    regulated_current: {{min: 1.5 mA, max: 2.1 mA}}
  bins:
    - {{bin: 1, class: pass, name: good}}
    - {{bin: 3, class: fail, classification: [open, short]}}
    - {{bin: 9, class: fail, name: aborted, verdict: aborted}}
    - {{bin: 5, class: fail}}
{extra}"""


def write_station(
    folder: Path,
    *,
    name: str = "FLC-bench-P1",
    channels: int = 6,
    seed: int = 2611,
    clock: str = "virtual",
    extra: str = "",
) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.yaml"
    path.write_text(
        STATION.format(name=name, channels=channels, seed=seed, clock=clock, extra=extra)
    )
    return path


def write_recipe(
    folder: Path, station: Path, *, lot: str = "FK2611-07", points: int = 41, extra: str = ""
) -> Path:
    path = folder / "recipe.yaml"
    path.write_text(RECIPE.format(lot=lot, station=station.name, points=points, extra=extra))
    return path
