"""What a run produces per device: the points as arrays, nothing else."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Curve:
    """The readings of one device, in the order they were taken.

    `level_v` is what was programmed, `voltage_v` what was measured (they differ where the SMU
    was clamping at its compliance), `segment` the index of the plan segment of each point.
    """

    device: str
    channel: int
    steps: tuple[str, ...]
    kinds: tuple[str, ...]
    segment: np.ndarray
    level_v: np.ndarray
    voltage_v: np.ndarray
    current_a: np.ndarray
    time_s: np.ndarray
    in_compliance: np.ndarray

    def __len__(self) -> int:
        return len(self.voltage_v)

    def of_kind(self, kind: str) -> np.ndarray:
        """Boolean mask of the points that belong to segments of this kind."""
        wanted = [i for i, k in enumerate(self.kinds) if k == kind]
        return np.isin(self.segment, wanted)

    @classmethod
    def from_sweep(cls, device: str, voltage_v, current_a, in_compliance=None) -> Curve:
        """A curve measured elsewhere (a CSV file): one sweep, programmed = measured voltage."""
        v = np.asarray(voltage_v, dtype=float)
        i = np.asarray(current_a, dtype=float)
        flags = np.zeros(len(v), bool) if in_compliance is None else np.asarray(in_compliance)
        zeros = np.zeros(len(v), int)
        return cls(device, 0, ("sweep",), ("sweep",), zeros, v, v, i, np.zeros(len(v)), flags)
