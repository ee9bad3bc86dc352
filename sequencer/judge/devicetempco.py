"""Temperature coefficient of the regulated current per device, from its results at each set
point (sequencer.judge.tempco does the fit), judged against the recipe's limits in %/K.

A device with results at fewer than two temperatures gets no coefficient ("not judged"); a
coefficient outside the limits fails with the numbers in its reason. The decision is on the
fitted value alone (no guard band from its uncertainty yet). Pure: rows in, results out.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from sequencer.judge.tempco import TempCo, fit_tempco

ZERO_C_K = 273.15


@dataclass(frozen=True, kw_only=True)
class TempCoLimits:
    min_pct_per_k: float | None = None
    max_pct_per_k: float | None = None


@dataclass(frozen=True)
class DeviceTempCo:
    device: str
    fit: TempCo | None
    verdict: str  # "pass", "fail" or "not judged"
    reason: str = ""


def device_tempcos(
    rows: Iterable[tuple[str, float, float, float | None]], limits: TempCoLimits
) -> list[DeviceTempCo]:
    """(device, temperature degC, regulated current A, its uncertainty A or None) per stored
    result -> one coefficient per device, in the order devices first appear."""
    grouped: dict[str, list[tuple[float, float, float | None]]] = {}
    for device, celsius, amps, u_amps in rows:
        if math.isfinite(celsius) and math.isfinite(amps):
            grouped.setdefault(device, []).append((celsius + ZERO_C_K, amps, u_amps))
    return [_one(device, readings, limits) for device, readings in grouped.items()]


def _one(device: str, readings: list, limits: TempCoLimits) -> DeviceTempCo:
    temps = [t for t, _, _ in readings]
    if len(set(temps)) < 2:
        return DeviceTempCo(device, None, "not judged", "results at fewer than two temperatures")
    uncertain = [u for _, _, u in readings]
    u_values = None if any(u is None for u in uncertain) else uncertain
    fit = fit_tempco(temps, [a for _, a, _ in readings], u_values)
    return DeviceTempCo(device, fit, *_decide(fit, limits))


def _decide(fit: TempCo, limits: TempCoLimits) -> tuple[str, str]:
    value = fit.pct_per_k
    low, high = limits.min_pct_per_k, limits.max_pct_per_k
    if low is None and high is None:
        return "pass", ""
    if not math.isfinite(value):
        return "not judged", "no finite coefficient"
    if low is not None and not value >= low:
        return "fail", f"tempco {value:.4g} %/K below its minimum {low:g} %/K"
    if high is not None and not value <= high:
        return "fail", f"tempco {value:.4g} %/K above its maximum {high:g} %/K"
    return "pass", ""
