"""The figures of the trade for many curves at once, as 2-D arrays (one row per device).

Every device of a run follows one plan, so the columns mean the same for every row: which
segment, which programmed level. Windows, coverage and spot matching are decided on the
programmed levels (what the recipe asked for, common to the lot); the arithmetic uses the
measured voltages and currents. A point taken while the SMU clamped at its compliance, or a
non-finite reading, is never used for a figure. Pure numpy, no I/O.

Missing figures carry a code (MISS_*) so that the words are made only for devices someone reads.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any, TypeVar

import numpy as np

from sequencer.judge.coverage import coverage_factor, effective_dof
from sequencer.judge.knee import crossing
from sequencer.judge.shape import classify
from sequencer.judge.slopes import Fit, impedance, masked_mean, window_fit
from sequencer.judge.uncertainty import combine
from sequencer.model.judgesettings import FIGURES, SHAPES, JudgeSettings

SPOT_MATCH_V = 1e-3  # a reading belongs to a level when programmed within this
WINDOW_EDGE_V = 1e-9  # programmed levels on the window's edge belong to it

MISS_UNCOVERED = 1  # the sweep does not reach the voltage / nothing programmed there
MISS_COMPLIANCE = 2  # clamped at compliance where the figure needs readings
MISS_FEW = 3  # fewer than 3 points in the slope window
MISS_NO_IP = 4  # the knee reference follows IP, which is missing
MISS_NEVER = 5  # the current never reaches the knee reference
MISS_FIRST = 6  # already above the knee reference at the first point
MISS_NEGATIVE = 7  # the slope is negative beyond its noise
MISS_NONFINITE = 8  # only non-finite readings there

DEAD = np.array([kind in ("open", "short") for kind in SHAPES])  # shape code -> no figures
DEAD.flags.writeable = False
IMPEDANCE_FIELDS = ("slope", "stderr", "points", "x_mean", "y_mean", "x_min", "x_max")  # of a Fit


SHARED_LAYOUTS = 64
_SHARED: dict[tuple, Layout] = {}
_SHARED_LOCK = threading.Lock()
T = TypeVar("T")


@dataclass(frozen=True, eq=False)
class Layout:
    """What every curve of a group shares: its plan, column by column."""

    kinds: tuple[str, ...]  # kind of each segment ("sweep", "spot")
    segment: np.ndarray  # (m,) segment of each column
    level_v: np.ndarray  # (m,) programmed level of each column

    @classmethod
    def of(cls, curve) -> Layout:
        return cls(curve.kinds, np.asarray(curve.segment), np.asarray(curve.level_v, float))

    @classmethod
    def shared(cls, curve) -> Layout:
        """The Layout of this curve's plan, one object for all the curves that followed it, so
        that what follows from the plan alone (columns, windows, weights) is worked out once,
        not once a device. A production plan's search reads levels of the device's own, so a
        lot has a few plans: the latest SHARED_LAYOUTS are kept."""
        layout = cls.of(curve)
        key = layout.key()
        with _SHARED_LOCK:
            found = _SHARED.get(key)
            if found is None:
                if len(_SHARED) >= SHARED_LAYOUTS:
                    del _SHARED[next(iter(_SHARED))]  # the oldest
                # Copies, read-only: the curve's arrays are its owner's to change.
                segment, level = layout.segment.copy(), layout.level_v.copy()
                segment.flags.writeable = level.flags.writeable = False
                found = _SHARED[key] = cls(layout.kinds, segment, level)
        return found

    def key(self) -> tuple:
        return (self.kinds, self.segment.tobytes(), self.level_v.tobytes())

    def remember(self, key: tuple, make: Callable[[], T]) -> T:
        """make(), worked out once for this layout: for what follows from the plan alone."""
        if key not in self._memo:
            self._memo[key] = make()
        return self._memo[key]

    @cached_property
    def _memo(self) -> dict[tuple, Any]:
        # Columns asked for more than once while a group is judged (the test voltage's spots,
        # the windows), kept: for one device their cost is the judge's cost.
        return {}

    def _is_kind(self, kind: str) -> np.ndarray:
        key = ("kind", kind)
        if key not in self._memo:
            # A plan has a few segments: a comparison with each is np.isin's answer at a
            # fraction of its fixed cost.
            hit = np.zeros(self.segment.shape, bool)
            for index, k in enumerate(self.kinds):
                if k == kind:
                    hit |= self.segment == index
            self._memo[key] = hit
        return self._memo[key]

    @cached_property
    def sweep(self) -> np.ndarray:
        """Forward sweep columns (programmed level >= 0), in order of programmed level."""
        cols = np.nonzero(self._is_kind("sweep") & (self.level_v >= 0))[0]
        return cols[np.argsort(self.level_v[cols], kind="stable")]

    @cached_property
    def forward(self) -> np.ndarray:
        """Every forward column, sweep or spot: where opens, shorts and clamping are seen."""
        return np.nonzero(self.level_v >= 0)[0]

    def sweep_levels(self) -> np.ndarray:
        return self._sweep_levels

    @cached_property
    def _sweep_levels(self) -> np.ndarray:
        return self.level_v[self.sweep]

    def covers(self, volts: float) -> bool:
        levels = self._sweep_levels
        return bool(levels.size) and levels[0] - SPOT_MATCH_V <= volts <= levels[-1] + SPOT_MATCH_V

    def window(self, centre_v: float, width_v: float) -> np.ndarray:
        """Forward sweep columns programmed within width/2 of the centre."""
        key = ("window", centre_v, width_v)
        if key not in self._memo:
            inside = np.abs(self._sweep_levels - centre_v) <= width_v / 2 + WINDOW_EDGE_V
            self._memo[key] = self.sweep[inside]
        return self._memo[key]

    def at(self, volts: float, kind: str | None = None) -> np.ndarray:
        """Columns programmed at this level (of one kind, or any)."""
        key = ("at", volts, kind)
        if key not in self._memo:
            hit = np.abs(self.level_v - volts) <= SPOT_MATCH_V
            if kind is not None:
                hit &= self._is_kind(kind)
            self._memo[key] = np.nonzero(hit)[0]
        return self._memo[key]


@dataclass(frozen=True, eq=False)
class Readings:
    """One group's readings: (n, m) arrays in the columns of a Layout."""

    layout: Layout
    voltage: np.ndarray
    current: np.ndarray
    clamped: np.ndarray

    @cached_property
    def good(self) -> np.ndarray:
        finite = np.isfinite(self.voltage) & np.isfinite(self.current)
        return finite & ~self.clamped

    def take(self, cols: np.ndarray, *arrays: str) -> tuple[np.ndarray, ...]:
        """voltage, current, good, clamped of these columns (views when they are a slice), or
        only the arrays named: for one device every copy is a call of its own."""
        pick = _as_slice(cols)
        return tuple(getattr(self, name)[:, pick] for name in arrays or READINGS)


READINGS = ("voltage", "current", "good", "clamped")


def _as_slice(cols: np.ndarray) -> slice | np.ndarray:
    # Compared as Python lists: a few columns, and np.array_equal's overhead is most of it.
    first = cols[0] if cols.size else 0
    if cols.size and cols.tolist() == list(range(first, first + cols.size)):
        return slice(int(first), int(first) + cols.size)
    return cols


@dataclass
class FigureArrays:
    """Per figure: value, standard uncertainty, lower-bound flag, missing code, effective
    degrees of freedom and coverage factor (U = k u); and the shape."""

    value: dict[str, np.ndarray]
    u: dict[str, np.ndarray]
    at_least: dict[str, np.ndarray]
    missing: dict[str, np.ndarray]
    shape: np.ndarray  # index into SHAPES
    shape_value: np.ndarray  # the number the shape's reason quotes
    knee_reference_a: np.ndarray
    nu: dict[str, np.ndarray]
    k: dict[str, np.ndarray]

    def expanded(self, name: str) -> np.ndarray:
        """U = k u (NaN where u or k is unknown)."""
        return self.k[name] * self.u[name]

    @classmethod
    def empty(cls, n: int) -> FigureArrays:
        # One block of each kind with a row per figure: four allocations, not 28.
        rows = len(FIGURES), n
        return cls(
            dict(zip(FIGURES, _nan(rows), strict=True)),
            dict(zip(FIGURES, _nan(rows), strict=True)),
            dict(zip(FIGURES, np.zeros(rows, bool), strict=True)),
            dict(zip(FIGURES, np.zeros(rows, np.int8), strict=True)),
            np.zeros(n, np.int8),
            _nan(n),
            _nan(n),
            dict(zip(FIGURES, np.full(rows, np.inf), strict=True)),
            dict(zip(FIGURES, _nan(rows), strict=True)),
        )

    def put(self, name: str, value, u, at_least=None, missing=None, nu=None) -> None:
        self.value[name] = np.asarray(value, float)
        self.u[name] = np.asarray(u, float)
        if nu is not None:
            self.nu[name] = np.broadcast_to(np.asarray(nu, float), self.u[name].shape).copy()
        if at_least is not None:
            self.at_least[name] = np.asarray(at_least, bool)
        if missing is not None:
            self.missing[name] = np.asarray(missing, np.int8)


def _nan(shape) -> np.ndarray:
    """np.full(shape, NaN) in two calls that need no Python of numpy's own."""
    out = np.empty(shape)
    out.fill(np.nan)
    return out


def compute(r: Readings, s: JudgeSettings) -> FigureArrays:
    """All figures of every row."""
    n = r.voltage.shape[0]
    out = FigureArrays.empty(n)
    with np.errstate(divide="ignore", invalid="ignore"):
        out.shape, out.shape_value, noise = classify(r, s)
        quantum = _quantum(r)
        zt_fit, zt_miss = _fit_at(r, s.test_voltage_v, s.slope_window_v, quantum)
        zk_fit, zk_miss = _fit_at(r, s.knee_voltage_v, s.knee_window, quantum)
        zt, zk = ("dynamic_impedance", zt_fit, zt_miss), ("knee_impedance", zk_fit, zk_miss)
        _impedances(out, s, zt, zk)
        ip_parts = _regulated_current(out, r, s, zt_fit, zt_miss)
        _limiting_voltage(out, r, s, noise, ip_parts)
        if s.reverse_voltage_v is not None:
            _at_level(out, r, s, "reverse_current", s.reverse_voltage_v)
        if s.peak_voltage_v is not None:
            _at_level(out, r, s, "peak_current", s.peak_voltage_v)
        _coverage(out, s)
    _blank_dead(out)
    return out


def _coverage(out: FigureArrays, s: JudgeSettings) -> None:
    """k per figure: fixed when the recipe names one, else Student's t at nu_eff."""
    for name in FIGURES:
        if s.coverage_factor is not None:
            k = np.full(out.u[name].shape, s.coverage_factor)
        else:
            k = coverage_factor(s.coverage_probability, out.nu[name])
        out.k[name] = np.where(np.isnan(out.u[name]), np.nan, k)


def _blank_dead(out: FigureArrays) -> None:
    """An open or a short has no figures at all; its shape is the whole story."""
    dead = DEAD[out.shape]
    if dead.any():
        for name in FIGURES:
            out.value[name][dead] = np.nan
            out.u[name][dead] = np.nan
            out.at_least[name][dead] = False
            out.missing[name][dead] = 0
            out.k[name][dead] = np.nan


def _quantum(r: Readings) -> np.ndarray:
    """Per row, the readings' own resolution: the smallest step between neighbouring forward
    sweep readings that differ at all (NaN when none do)."""
    i, good = r.take(r.layout.sweep, "current", "good")
    step = np.abs(np.diff(i, axis=1))
    pair = good[:, 1:] & good[:, :-1]
    usable = pair & (step > 0)
    q = np.minimum.reduce(np.where(usable, step, np.inf), axis=1, initial=np.inf)
    # Only readings that look rounded count: some neighbours equal, every step a whole number
    # of q. A smooth curve's smallest step is a slope, not a resolution.
    multiple = step / q[:, None]
    whole = np.abs(multiple - np.round(multiple)) <= 1e-3
    rounded = np.logical_or.reduce(pair & (step == 0), axis=1)
    rounded &= np.logical_and.reduce(whole | ~usable, axis=1) & np.isfinite(q)
    return np.where(rounded, q, np.nan)


def _fit_at(
    r: Readings, centre_v: float, width_v: float, quantum: np.ndarray
) -> tuple[Fit, np.ndarray]:
    n = r.voltage.shape[0]
    cols = r.layout.window(centre_v, width_v)
    v, i, good, clamped = r.take(cols)
    fit = window_fit(v, i, good)
    # Readings rounded to a step q carry a rectangular error of u = q / sqrt 12 each [JCGM
    # 100:2008 F.2.2.1]; in the slope it is u / sqrt(Sxx). Without it, equal readings give a
    # slope of 0 +/- 0 (a "negative beyond its noise" slope) where a bound is all there is.
    resolution = np.fmax(quantum, 0.0) / np.sqrt(12.0) / np.sqrt(fit.sxx)
    fit = replace(
        fit, stderr=np.where(np.isnan(fit.slope), np.nan, combine(fit.stderr, resolution))
    )
    if not r.layout.covers(centre_v):
        return fit, np.full(n, MISS_UNCOVERED, np.int8)
    miss = np.zeros(n, np.int8)
    np.copyto(miss, MISS_FEW, where=fit.points < 3)
    np.copyto(miss, MISS_COMPLIANCE, where=_any(clamped))
    return fit, miss


def _impedances(out: FigureArrays, s: JudgeSettings, *both: tuple[str, Fit, np.ndarray]) -> None:
    """Both impedances from their fits at once, a row each: the same arithmetic on the same
    numbers, half the calls (what one device judged alone pays for)."""
    rows = {item: np.array([getattr(f, item) for _, f, _ in both]) for item in IMPEDANCE_FIELDS}
    fit = Fit(**rows, sxx=None, resid_sd=None)  # (what an impedance needs)
    miss = np.array([m for _, _, m in both])
    nu_fit = fit.points - 2.0  # the slope's standard error has n - 2 degrees of freedom
    z = impedance(fit, _k(s, nu_fit))
    acc = s.accuracy
    low_i, high_i = fit.at(fit.x_min), fit.at(fit.x_max)
    rel_v = acc.voltage.u_difference(fit.x_min, fit.x_max) / (fit.x_max - fit.x_min)
    rel_i = acc.current.u_difference(low_i, high_i) / np.abs(high_i - low_i)
    u = z.value * combine(z.rel_type_a, rel_v, rel_i)
    # The instrument's parts are Type B from stated limits: infinite degrees of freedom.
    type_b = z.value * combine(rel_v, rel_i)
    nu = effective_dof([(z.value * z.rel_type_a, nu_fit), (type_b, np.inf)])
    bad = miss > 0
    missing = np.where(bad, miss, np.where(z.negative, MISS_NEGATIVE, 0))
    value = np.where(bad, np.nan, z.value)
    u = np.where(bad | z.at_least, np.nan, u)
    at_least = z.at_least & ~bad
    for row, (name, _, _) in enumerate(both):
        out.put(name, value[row], u[row], at_least[row], missing[row], nu[row])


def _k(s: JudgeSettings, nu: np.ndarray) -> np.ndarray:
    """The coverage factor the recipe asks for at these degrees of freedom."""
    if s.coverage_factor is not None:
        return np.full(np.shape(nu), s.coverage_factor)
    return coverage_factor(s.coverage_probability, nu)


def _regulated_current(out, r: Readings, s: JudgeSettings, fit: Fit, fit_miss: np.ndarray):
    vt = s.test_voltage_v
    spots = r.layout.at(vt, "spot")
    slope = np.where(out.missing["dynamic_impedance"] == 0, np.maximum(fit.slope, 0.0), 0.0)
    u_from_v = slope * _u_volts(s, vt)  # a voltage error moves the current by dI/dV
    if spots.size:
        mean, type_a, miss, _, count = _mean_of(*r.take(spots), with_count=True)
        nu_a = count - 1.0
    else:
        mean = np.where(fit_miss > 0, np.nan, fit.at(vt))
        type_a, miss = fit.u_at(vt), fit_miss
        nu_a = fit.points - 2.0
    u_b = combine(s.accuracy.current.u(mean), u_from_v)
    u = combine(type_a, u_b)
    nu = effective_dof([(type_a, nu_a), (u_b, np.inf)])
    out.put("regulated_current", mean, np.where(miss > 0, np.nan, u), missing=miss, nu=nu)
    return IpParts(mean, type_a, nu_a, u_from_v)


@dataclass(frozen=True, eq=False)
class IpParts:
    """IP's input quantities, for the figures that follow it (the knee reference): its gain
    and offset errors are the instrument's, shared with readings on the same range."""

    mean: np.ndarray
    type_a: np.ndarray
    nu_a: np.ndarray
    u_from_v: np.ndarray


def _any(mask: np.ndarray) -> np.ndarray:
    """Per row: does the mask hold anywhere (ndarray.any without its Python wrapper)."""
    return np.logical_or.reduce(mask, axis=1)


def _mean_of(v, i, good, clamped, power: bool = False, with_count: bool = False):
    """Mean of the good readings given; Type A u = s/sqrt(n) (0 for one reading); and, when
    asked for, the mean power (None otherwise) and the count."""
    count, mean, sd = masked_mean(i, good)
    type_a = np.where(count >= 2, sd / np.sqrt(count), 0.0)
    miss = np.where(count > 0, 0, np.where(_any(clamped), MISS_COMPLIANCE, MISS_NONFINITE))
    watts = np.add.reduce(np.where(good, v * i, 0.0), axis=1) / count if power else None
    found = np.where(count > 0, mean, np.nan), type_a, miss.astype(np.int8), watts
    return (*found, count) if with_count else found


def _limiting_voltage(
    out: FigureArrays, r: Readings, s: JudgeSettings, noise: np.ndarray, ip: IpParts
):
    n = r.voltage.shape[0]
    fixed = s.knee_reference_a()
    measured = s.knee_fraction * out.value["regulated_current"]
    ref = np.full(n, fixed) if fixed is not None else measured
    v, i, good = r.take(r.layout.sweep, "voltage", "current", "good")
    if v.shape[1] == 0:
        out.put("limiting_voltage", np.full(n, np.nan), np.full(n, np.nan), missing=[1] * n)
        out.knee_reference_a = ref
        return
    knee = crossing(v, i, good, ref)
    miss = np.zeros(n, np.int8)  # each reason below overrides those above it
    np.copyto(miss, MISS_COMPLIANCE, where=~knee.prev_good)
    np.copyto(miss, MISS_FIRST, where=knee.first)
    np.copyto(miss, MISS_NEVER, where=~knee.found)
    np.copyto(miss, MISS_NO_IP, where=np.isnan(ref))
    # The current's uncertainty at the crossing moves the voltage by dV/dI there.
    u_inst, u_a, nu_a = _knee_current_parts(s, ref, ip, fixed is not None)
    u_noise = _known(noise)
    vl = knee.volts
    parts = [
        (s.accuracy.voltage.u(vl), np.inf),
        (u_inst / knee.slope, np.inf),
        (u_a / knee.slope, nu_a),
        (u_noise / knee.slope, _plateau_dof(r, s)),
        (knee.u_interpolation, np.inf),
    ]
    u = combine(*(part for part, _ in parts))
    bad = miss > 0
    nu = effective_dof(parts)
    out.put("limiting_voltage", np.where(bad, np.nan, vl), np.where(bad, np.nan, u), None, miss, nu)
    out.knee_reference_a = ref


def _knee_current_parts(s: JudgeSettings, ref: np.ndarray, ip: IpParts, fixed: bool):
    """(instrument u, Type A u, its nu) of the difference between the reading at the crossing
    and the knee reference. A fixed reference is exact: the reading carries the instrument's
    whole error. A reference of f x IP read on the same range shares the gain error and the
    offset with the reading: the gain cancels in I - f IP (both are the same current there)
    and (1 - f) of the offset remains [JCGM 100:2008 5.2, correlated input quantities]; on
    another range they are independent."""
    table = s.accuracy.current
    if fixed:
        return table.u(ref), np.zeros(ref.shape), np.inf
    f = s.knee_fraction
    offset = table.arrays()[2]
    k_ref = table.range_index(np.fmax(np.abs(ref), 0.0))
    k_ip = table.range_index(np.fmax(np.abs(ip.mean), 0.0))
    same = (1 - f) * offset[k_ref] / np.sqrt(3.0)
    apart = combine(table.u(ref), f * table.u(ip.mean))
    u_inst = combine(np.where(k_ref == k_ip, same, apart), f * ip.u_from_v)
    return u_inst, f * _known(ip.type_a), ip.nu_a


def _plateau_dof(r: Readings, s: JudgeSettings) -> float:
    """Degrees of freedom of the plateau's noise estimate: one per inner point [approximate:
    neighbouring distances share a point, so this is an upper bound]."""
    levels = r.layout.sweep_levels()
    return max(float(np.count_nonzero(levels >= s.knee_voltage_v - 1e-9)) - 2.0, 1.0)


def _u_volts(s: JudgeSettings, volts: float) -> np.ndarray:
    """u of the voltage reading at a level the recipe names: the same for every device."""
    return s.remember(f"u(V) at {volts!r}", lambda: s.accuracy.voltage.u(volts))


def _known(u: np.ndarray) -> np.ndarray:
    """An uncertainty with NaN (not known) as 0, as nan_to_num gives it: u is never negative,
    so fmax, which drops a NaN, does it in one operation."""
    return np.fmax(u, 0.0)


def _clamped_bound(magnitude: np.ndarray, clamped: np.ndarray) -> np.ndarray:
    """The largest magnitude read while clamped: the true value is at least this."""
    return np.maximum.reduce(np.where(clamped, magnitude, -np.inf), axis=1, initial=-np.inf)


def _at_level(out: FigureArrays, r: Readings, s: JudgeSettings, name: str, volts: float) -> None:
    """Readings programmed at one level: their mean magnitude, or a bound when clamped."""
    n = r.voltage.shape[0]
    cols = r.layout.at(volts)
    if cols.size == 0:
        miss = np.full(n, MISS_UNCOVERED)
        out.put(name, np.full(n, np.nan), np.full(n, np.nan), None, miss)
        if name == "peak_current":
            out.put("peak_dissipation", np.full(n, np.nan), np.full(n, np.nan), None, miss)
        return
    peak = name == "peak_current"
    v, i, good, clamped_at = r.take(cols)
    mean, type_a, miss, power = _mean_of(v, i, good, clamped_at, power=peak)
    clamped, bound = _any(clamped_at), _clamped_bound(np.abs(i), clamped_at)
    value = np.where(clamped, bound, np.abs(mean))
    u_b = s.accuracy.current.u(mean)
    u = combine(type_a, u_b)
    ok = ~clamped & (miss == 0)
    miss = np.where(clamped, 0, miss)
    count = np.add.reduce(good, axis=1)
    nu = effective_dof([(type_a, np.fmax(count - 1.0, 1.0)), (u_b, np.inf)])
    out.put(name, value, np.where(ok, u, np.nan), clamped, miss, nu)
    if peak:
        p_bound = _clamped_bound(np.abs(v * i), clamped_at)
        u_p = combine(mean * _u_volts(s, volts), volts * u)
        p = np.where(clamped, p_bound, np.abs(power))
        out.put("peak_dissipation", p, np.where(ok, u_p, np.nan), clamped, miss)
