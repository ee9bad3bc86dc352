"""A whole lot at once: curves that followed one plan are stacked into (devices x points)
arrays and judged by the same engine as one curve, so the figures are the same either way.

Curves of another layout (a device interrupted part-way has fewer points) form groups of their
own; the result keeps the input order.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sequencer.judge.engine import Judgement, LotResult, judge_arrays
from sequencer.judge.figures import Layout
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import JudgeSettings


@dataclass(frozen=True, eq=False)
class Stack:
    """Curves of one layout as arrays; `rows` are their places in the input sequence."""

    layout: Layout
    rows: tuple[int, ...]
    voltage: np.ndarray
    current: np.ndarray
    clamped: np.ndarray


def stack(curves: Sequence[Curve]) -> list[Stack]:
    """Group curves by plan layout and stack each group's readings."""
    groups: dict[tuple, list[int]] = {}
    layouts: dict[tuple, Layout] = {}
    for index, curve in enumerate(curves):
        layout = Layout.of(curve)
        key = layout.key()
        groups.setdefault(key, []).append(index)
        layouts.setdefault(key, layout)
    out = []
    for key, rows in groups.items():
        members = [curves[k] for k in rows]
        out.append(
            Stack(
                layouts[key],
                tuple(rows),
                np.stack([c.voltage_v for c in members]),
                np.stack([c.current_a for c in members]),
                np.stack([np.asarray(c.in_compliance, bool) for c in members]),
            )
        )
    return out


def judge_stack(group: Stack, settings: JudgeSettings) -> LotResult:
    return judge_arrays(group.layout, group.voltage, group.current, group.clamped, settings)


def judge_lot(curves: Sequence[Curve], settings: JudgeSettings) -> list[Judgement]:
    """One judgement per curve, in the order given."""
    out: list[Judgement | None] = [None] * len(curves)
    for group in stack(curves):
        result = judge_stack(group, settings)
        for row, index in enumerate(group.rows):
            out[index] = result.judgement(row, curves[index].device)
    return [j for j in out if j is not None]
