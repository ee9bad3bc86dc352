"""Limits checked before the wire: the whole plan before the output is ever switched on, and
every level and reading again, through one guard, as the runner sends and receives them.

The limits are the effective ones (sequencer.recipe.limits): the smallest of station, recipe and
device ratings. A refusal names the step, the numbers and the layer whose limit it hit.

Every comparison is written so that NaN fails it (`not (value <= limit)`, never
`value > limit`, which is false for NaN), and every level, compliance and reading must be
finite before it is compared at all: the loaders refuse non-finite numbers too, but this layer
does not rely on them.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Protocol

from sequencer.model.errors import SafetyError
from sequencer.model.units import format_si
from sequencer.plan.segments import Plan, Segment
from sequencer.recipe.limits import EffectiveLimits, Limits, as_effective

CAUTION = (
    "Caution: an SMU output can carry hazardous voltage. Keep the fixture closed and interlocked, "
    "switch the output off before touching a device, and follow your local electrical codes and "
    "licensed practice."
)
# A reading may exceed the programmed compliance by the instrument's overshoot and noise; beyond
# this it did not hold the limit (common practice, no source: SMUs specify about 0.1 % + offset).
COMPLIANCE_SLACK = 1.05
COMPLIANCE_SLACK_A = 1e-6
VOLTAGE_SLACK = 1.02  # a reading this far above the highest level means the source misbehaves
VOLTAGE_SLACK_V = 0.1


class Trip(SafetyError):
    """The run-time guard stopped a device. `scope` is "device" when the device itself is at
    fault (its reading, its clamping), so the recipe's `on_trip` decides whether the run goes on;
    "run" when the bench is (interlock, a refused level, an instrument not holding its limit),
    which always stops the run."""

    def __init__(self, message: str, scope: str = "run") -> None:
        super().__init__(message)
        self.scope = scope


# --- pre-flight -------------------------------------------------------------------------------


def preflight(plan: Plan, limits: Limits | EffectiveLimits) -> EffectiveLimits:
    """Refuse a plan that asks for more than the limits allow, naming the step and the numbers.

    Every level of every step is checked (a step's peak is its worst point, since each check
    grows with |V|). Returns the effective limits the plan was checked against.
    """
    effective = as_effective(limits)
    for seg in plan.segments:
        _check_segment(seg, effective)
    return effective


def _check_segment(seg: Segment, lim: EffectiveLimits) -> None:
    where = f"step '{seg.step}'"
    _check_finite(seg, where)
    volts, comp = seg.peak_voltage_v, seg.compliance_a
    if not volts <= lim.voltage.value:
        raise SafetyError(
            f"{where} reaches {volts:g} V, above {lim.voltage.describe('V')}; lower the step"
            + (" or raise the station limit" if lim.voltage.source == "station" else "")
        )
    if not comp <= lim.current.value:
        raise SafetyError(
            f"{where} sets compliance {comp * 1e3:g} mA, above {lim.current.describe('A')}"
        )
    if not volts * comp <= lim.power.value:
        raise SafetyError(
            f"{where} could deliver {volts:g} V x {comp * 1e3:g} mA = "
            f"{volts * comp * 1e3:.4g} mW, above {lim.power.describe('W')}; lower the compliance"
        )
    device_w = lim.device_power_w(volts, comp)
    if lim.dissipation is not None and not device_w <= lim.dissipation.value:
        current = min(comp, lim.worst_case_current_a or comp)
        raise SafetyError(
            f"{where} could dissipate {volts:g} V x {current * 1e3:g} mA = {device_w * 1e3:.4g} mW "
            f"in the device, above {lim.dissipation.describe('W')}"
        )


def _check_finite(seg: Segment, where: str) -> None:
    """Every level finite (a peak taken with max() can hide a NaN), compliance and settling
    finite and the compliance positive."""
    bad = next((v for v in seg.levels_v if not math.isfinite(v)), None)
    if bad is not None:
        raise SafetyError(f"{where} has a level that is not a finite number ({bad!r} V)")
    if not (math.isfinite(seg.compliance_a) and seg.compliance_a > 0):
        raise SafetyError(f"{where} has a compliance that is not a finite positive number "
                          f"({seg.compliance_a!r} A)")  # fmt: skip
    if not (math.isfinite(seg.settle_s) and seg.settle_s >= 0):
        raise SafetyError(f"{where} has a settling time that is not finite ({seg.settle_s!r} s)")


def is_hazardous(plan: Plan, limits: Limits | EffectiveLimits) -> bool:
    touch_safe = as_effective(limits).touch_safe_v
    return any(not _touch_safe(s.peak_voltage_v, touch_safe) for s in plan.segments)


def _touch_safe(volts: float, touch_safe_v: float) -> bool:
    return abs(volts) <= touch_safe_v  # NaN is never touch-safe


def check_hazard(
    plan: Plan, limits: EffectiveLimits, *, station: str, interlocked: bool, acknowledged: bool
) -> None:
    """Levels above the touch-safe voltage need an interlocked fixture and an acknowledgement."""
    if not is_hazardous(plan, limits):
        return
    touch_safe = limits.touch_safe_v
    step = next(s.step for s in plan.segments if not _touch_safe(s.peak_voltage_v, touch_safe))
    reach = (
        f"step '{step}' reaches {plan.peak_voltage_v:g} V, above the touch-safe {touch_safe:g} V"
    )
    if not interlocked:
        raise SafetyError(f"{reach}, but station {station} declares no interlocked fixture")
    if not acknowledged:
        raise SafetyError(
            f"{reach}: acknowledge it with 'hazardous_voltage: acknowledged' in the recipe or "
            "--allow-hazardous-voltage on the command line"
        )


# --- the run-time guard -----------------------------------------------------------------------


@dataclass
class Guard:
    """The one function every level passes through at run time, and every reading after it.

    Before every level above the touch-safe voltage the interlock is read (`interlock_closed`),
    so a lid opened mid-sweep stops the run at the next such level. `level_v` is the last level
    the runner wrote (it reports each one through `applied`, ramp-down steps included), so a
    shutdown from outside ramps down from where the output really is and never above it.
    `no_clamp_steps` names the steps whose recipe says `on_compliance: trip`.
    """

    limits: Limits | EffectiveLimits
    interlock_closed: Callable[[], bool]
    no_clamp_steps: frozenset[str] = frozenset()
    level_v: float = 0.0
    interlock_reads: int = field(default=0, repr=False)

    def __post_init__(self) -> None:
        self.limits = as_effective(self.limits)

    @property
    def effective(self) -> EffectiveLimits:
        assert isinstance(self.limits, EffectiveLimits)
        return self.limits

    def check_level(self, volts: float, compliance_a: float) -> None:
        """Raise Trip unless `volts` at this compliance lies within every limit (a NaN or an
        infinity lies within none)."""
        lim = self.effective
        if not (math.isfinite(volts) and math.isfinite(compliance_a) and compliance_a > 0):
            raise Trip(f"refused {volts!r} V at compliance {compliance_a!r} A: not finite numbers")
        if not abs(volts) <= lim.voltage.value:
            raise Trip(f"refused {volts:g} V: above {lim.voltage.describe('V')}")
        if not compliance_a <= lim.current.value:
            raise Trip(
                f"refused compliance {format_si(compliance_a, 'A')}: above "
                f"{lim.current.describe('A')}"
            )
        if not abs(volts) * compliance_a <= lim.power.value:
            raise Trip(
                f"refused {volts:g} V at {compliance_a * 1e3:g} mA: could exceed "
                f"{lim.power.describe('W')}"
            )
        dissipation = lim.dissipation
        if dissipation is not None and not (
            lim.device_power_w(volts, compliance_a) <= dissipation.value
        ):
            raise Trip(f"refused {volts:g} V: could exceed {dissipation.describe('W')}")
        if not _touch_safe(volts, lim.touch_safe_v):
            self._require_interlock(volts)

    def _require_interlock(self, volts: float) -> None:
        from instruments import DialectError  # start-up speed: `instruments` loads pyvisa

        self.interlock_reads += 1
        try:
            closed = self.interlock_closed()
        except DialectError as exc:  # a lid that cannot be read never counts as closed
            raise Trip(f"refused {volts:g} V: the interlock cannot be read ({exc.detail})") from exc
        if not closed:
            raise Trip(f"refused {volts:g} V: the fixture interlock reads open; close the lid")

    def check_reading(self, step: str, compliance_a: float, reading: Reading) -> None:
        """Raise Trip for a reading beyond the limits, not a number, or clamped where the step
        must not clamp."""
        volts, amps = reading.voltage_v, reading.current_a
        _check_reading_finite(step, volts, amps, self.level_v)
        if not abs(amps) <= compliance_a * COMPLIANCE_SLACK + COMPLIANCE_SLACK_A:
            raise Trip(
                f"step '{step}': read {format_si(amps, 'A')} with compliance "
                f"{format_si(compliance_a, 'A')}: the instrument did not hold its current limit"
            )
        if not abs(volts) <= abs(self.level_v) * VOLTAGE_SLACK + VOLTAGE_SLACK_V:
            raise Trip(
                f"step '{step}': read {volts:g} V with at most {self.level_v:g} V programmed: "
                "the source does not follow its level"
            )
        self._check_power(step, volts, amps)
        if reading.in_compliance and step in self.no_clamp_steps:
            raise Trip(
                f"step '{step}': in compliance at {volts:g} V ({format_si(amps, 'A')}), and the "
                "recipe says this step must not clamp (on_compliance: trip)",
                scope="device",
            )

    def _check_power(self, step: str, volts: float, amps: float) -> None:
        lim, power = self.effective, abs(volts * amps)
        said = f"step '{step}': reading {volts:g} V x {amps * 1e3:g} mA = {power * 1e3:.4g} mW"
        if not power <= lim.power.value:
            raise Trip(f"{said} exceeds {lim.power.describe('W')}")
        if lim.dissipation is not None and not power <= lim.dissipation.value:
            raise Trip(f"{said} exceeds {lim.dissipation.describe('W')}", scope="device")

    def applied(self, volts: float) -> None:
        """The runner wrote `volts` to the output (a level, a ramp-down step, or 0 at the end)."""
        self.level_v = volts


def _check_reading_finite(step: str, volts: float, amps: float, level_v: float) -> None:
    """A reading that is not a number (SCPI sends 9.91E37 for one) or an infinity (9.9E37, an
    overflow) says nothing about the output: it is never data, and the run stops, since the
    instrument, not the device, failed to measure."""
    for name, value in (("voltage", volts), ("current", amps)):
        if math.isnan(value):
            raise Trip(
                f"step '{step}': the instrument read the {name} at {level_v:g} V as not a number "
                "(SCPI NaN, 9.91E37): no valid reading; check the instrument and its range"
            )
        if math.isinf(value):
            raise Trip(
                f"step '{step}': the instrument read the {name} at {level_v:g} V as "
                f"{'-' if value < 0 else '+'}infinite (SCPI 9.9E37, an overflow): no valid "
                "reading; check the instrument and its range"
            )


class Reading(Protocol):  # what check_reading needs (instruments.smu.Reading provides it)
    voltage_v: float
    current_a: float
    in_compliance: bool


def no_clamp_steps(steps: Iterable[object]) -> frozenset[str]:
    """Names of the recipe steps with `on_compliance: trip`."""
    return frozenset(s.name for s in steps if getattr(s, "on_compliance", "flag") == "trip")
