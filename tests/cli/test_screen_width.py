"""Device lines at 80 columns: nothing cut, nothing wrapped mid-word; reasons on a line of
their own by design; names longer than the column written whole (a pipe or a file gets them)."""

from __future__ import annotations

import io

import numpy as np
from rich.console import Console

from sequencer.bench.lotrun import DeviceDone
from sequencer.cli.view import device_line
from sequencer.judge.engine import judge_curve
from tests.report.conftest import Part, curve_of, demo_recipe, lot_parts


def shown(parts: list[Part], width: int = 80) -> list[str]:
    recipe, rng = demo_recipe(), np.random.default_rng(3)
    console = Console(file=io.StringIO(), width=width, color_system=None)
    for k, part in enumerate(parts, start=1):
        curve = curve_of(part, k, rng)
        judgement = judge_curve(curve, recipe.judge)
        done = DeviceDone(k, len(parts), curve, judgement, 0.1)
        console.print(device_line(done))  # as the run's screen prints it
    return console.file.getvalue().splitlines()


def test_every_device_line_fits_80_columns():
    parts = lot_parts("FK2611-07")  # a pass, fail, guard-band, short and open among them
    lines = shown(parts)
    assert {len(line) <= 80 for line in lines} == {True}, max(lines, key=len)
    verdicts = " ".join(lines)
    assert all(word in verdicts for word in ("pass", "fail", "guard-band"))
    reasons = [line for line in lines if line.startswith("    ") and line.strip()]
    assert any("below min" in line for line in reasons)  # the reason has its own line


def test_a_long_name_is_written_whole():
    name = "FK2611-07-" + "9" * 40
    lines = shown([Part(name, 1.8e-3, 300e3)])
    assert name in "".join(lines)  # folded at the edge if need be, never shortened
    assert "…" not in "".join(lines)
