"""Limits checked before the wire: the whole plan before the output is ever switched on, and
every level again, through one guard, as the runner sends it."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from .errors import SafetyError
from .plan import Plan
from .recipe import Limits

CAUTION = (
    "Caution: an SMU output can carry hazardous voltage. Keep the fixture closed and interlocked, "
    "switch the output off before touching a device, and follow your local electrical codes and "
    "licensed practice."
)


def preflight(plan: Plan, limits: Limits) -> None:
    """Refuse a plan that asks for more than the limits allow, naming the step and the numbers."""
    for seg in plan.segments:
        where = f"step '{seg.step}'"
        if seg.peak_voltage_v > limits.max_voltage_v:
            raise SafetyError(
                f"{where} reaches {seg.peak_voltage_v:g} V, above the station's maximum "
                f"{limits.max_voltage_v:g} V; lower the step or raise the station limit"
            )
        if seg.compliance_a > limits.max_current_a:
            raise SafetyError(
                f"{where} sets compliance {seg.compliance_a * 1e3:g} mA, above the station's "
                f"maximum {limits.max_current_a * 1e3:g} mA"
            )
        if seg.peak_power_w > limits.max_power_w:
            raise SafetyError(
                f"{where} could dissipate {seg.peak_voltage_v:g} V x "
                f"{seg.compliance_a * 1e3:g} mA = {seg.peak_power_w * 1e3:.4g} mW, above the "
                f"station's maximum {limits.max_power_w * 1e3:g} mW; lower the compliance"
            )


def is_hazardous(plan: Plan, limits: Limits) -> bool:
    return plan.peak_voltage_v > limits.touch_safe_v


@dataclass
class Guard:
    """The one function every level passes through at run time.

    `interlock_closed` is asked before the first level above the touch-safe voltage of each
    device; the runner resets `checked_interlock` when a new device is connected.
    """

    limits: Limits
    interlock_closed: Callable[[], bool]
    checked_interlock: bool = False

    def check_level(self, volts: float, compliance_a: float) -> None:
        if abs(volts) > self.limits.max_voltage_v:
            raise SafetyError(
                f"refused {volts:g} V: above the maximum {self.limits.max_voltage_v:g} V"
            )
        if compliance_a > self.limits.max_current_a:
            raise SafetyError(f"refused compliance {compliance_a:g} A: above the maximum")
        if abs(volts) * compliance_a > self.limits.max_power_w:
            raise SafetyError(
                f"refused {volts:g} V at {compliance_a * 1e3:g} mA: could exceed "
                f"{self.limits.max_power_w * 1e3:g} mW"
            )
        if abs(volts) > self.limits.touch_safe_v and not self.checked_interlock:
            if not self.interlock_closed():
                raise SafetyError(
                    f"refused {volts:g} V: the fixture interlock reads open; close the lid"
                )
            self.checked_interlock = True

    def check_reading(self, volts: float, amps: float) -> None:
        if abs(volts * amps) > self.limits.max_power_w:
            raise SafetyError(
                f"reading {volts:g} V x {amps * 1e3:g} mA = {abs(volts * amps) * 1e3:.4g} mW "
                f"exceeds the maximum {self.limits.max_power_w * 1e3:g} mW"
            )
