"""Vectorised physical models of two-terminal devices under test: current I(V) and its inverse.

Sign convention (REFERENCES.md): V = V(anode) - V(cathode); I > 0 flows anode to cathode.

The JFET regulator is the level-1 (Shichman-Hodges) n-channel JFET of the SPICE family in both
regions and both modes, with the (1 + lambda |VDS|) factor and both gate junctions as diodes, self-
biased through a source resistor: drain = anode, gate = cathode, source through RS to cathode.
A reverse-biased regulator therefore conducts through its forward-biased gate-drain junction,
like a diode. Every model takes a temperature argument; the JFET applies the SPICE temperature
laws VTO(T) = VTO - TCV (T - TNOM) and BETA(T) = BETA (T/TNOM)^BEX (both off by default), and
every junction the SPICE saturation-current law
    IS(T) = IS exp((T/TNOM - 1) EG / (N kT/q)) (T/TNOM)^(XTI/N)      (EG 1.11 eV, XTI 3)
as ngspice's diode and JFET (with XTI given) models do.

Each device offers `current(v)`, `current_slope(v)` -> (I, dI/dV) and `voltage_at(i, v_bound)`:
the voltage between 0 and v_bound at which it draws `i` (the SMU's compliance clamp needs it).
All accept and return numpy arrays. `point_current`, `point_current_slope` and
`point_voltage_at` are the same on one operating point in Python floats, for the SMU's
readings one at a time: the same formulas in the same order and the same solver steps
(solve.solve_point), so they agree with the array forms to rounding, at a small fraction of
numpy's per-call cost on a 0-d array.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike

from simulator.errors import ModelError
from simulator.solve import solve_increasing, solve_point

BOLTZMANN = 1.380649e-23  # J/K, exact (SI 2019)
ELEMENTARY_CHARGE = 1.602176634e-19  # C, exact (SI 2019)
TNOM_K = 300.15  # 27 C, the SPICE default nominal and circuit temperature
EXP_LIMIT = 80.0  # exponents are clipped to +/-80; above, currents continue linearly (monotone)
OPEN_OHM = 1e12  # an open device still leaks a little, which keeps every model strictly monotone
SHORT_OHM = 0.5

Pair = tuple[np.ndarray, np.ndarray]
PointPair = tuple[float, float]


def thermal_voltage(temp_k: float) -> float:
    """kT/q in volts."""
    return BOLTZMANN * temp_k / ELEMENTARY_CHARGE


def saturation_current(
    is_a: float, temp_k: float, tnom_k: float, eg_ev: float, xti: float, n: float = 1.0
) -> float:
    """IS(T) by the SPICE law (module docstring); IS itself at TNOM."""
    if temp_k == tnom_k:
        return is_a
    ratio = temp_k / tnom_k
    activation = (ratio - 1) * eg_ev / (n * thermal_voltage(temp_k))
    return is_a * float(np.exp(activation)) * ratio ** (xti / n)


def junction(v: np.ndarray, is_a: float, n_vt: float) -> Pair:
    """Shockley diode current and conductance; the exponent is clipped, then continued linearly."""
    x = v / n_vt
    e = np.exp(np.clip(x, -EXP_LIMIT, EXP_LIMIT))
    return is_a * (e * (1.0 + np.maximum(x - EXP_LIMIT, 0.0)) - 1.0), is_a * e / n_vt


def junction_point(v: float, is_a: float, n_vt: float) -> PointPair:
    """`junction` on one voltage."""
    x = v / n_vt
    e = math.exp(min(max(x, -EXP_LIMIT), EXP_LIMIT))
    return is_a * (e * (1.0 + max(x - EXP_LIMIT, 0.0)) - 1.0), is_a * e / n_vt


class Device(Protocol):
    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair: ...

    def current(self, v: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray: ...

    def voltage_at(
        self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K
    ) -> np.ndarray: ...

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair: ...

    def point_current(self, v: float, temp_k: float = TNOM_K) -> float: ...

    def point_voltage_at(self, i: float, v_bound: float, temp_k: float = TNOM_K) -> float: ...


def _bracket(v_bound: ArrayLike, shape: tuple[int, ...]) -> Pair:
    vb = np.broadcast_to(np.asarray(v_bound, dtype=float), shape)
    return np.minimum(vb, 0.0), np.maximum(vb, 0.0)


def _clip_point(v: float, v_bound: float) -> float:
    return min(max(v, min(v_bound, 0.0)), max(v_bound, 0.0))


class _Base:
    """Shared derived operations: current from current_slope, voltage_at by a bracketed solve.

    The point forms fall back on the array forms, so a model without its own point path is
    still right, only slower."""

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        raise NotImplementedError

    def current(self, v: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray:
        return self.current_slope(v, temp_k)[0]

    def voltage_at(self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray:
        """Voltage between 0 and v_bound where the device draws `i`; the bound if it never does."""
        target = np.asarray(i, dtype=float)
        lo, hi = _bracket(v_bound, np.broadcast_shapes(target.shape, np.shape(v_bound)))

        def excess(v: np.ndarray) -> Pair:
            current, slope = self.current_slope(v, temp_k)
            return current - target, slope

        return solve_increasing(excess, lo, hi, self._voltage_guess(target, temp_k), xtol=1e-12)

    def _voltage_guess(self, i: np.ndarray, temp_k: float) -> np.ndarray | None:
        return None  # start from the middle of the bracket

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair:
        current, slope = self.current_slope(v, temp_k)
        return float(current), float(slope)

    def point_current(self, v: float, temp_k: float = TNOM_K) -> float:
        return self.point_current_slope(v, temp_k)[0]

    def point_voltage_at(self, i: float, v_bound: float, temp_k: float = TNOM_K) -> float:
        """`voltage_at` on one current: the same solve, step for step."""

        def excess(v: float) -> PointPair:
            current, slope = self.point_current_slope(v, temp_k)
            return current - i, slope

        guess = self._point_voltage_guess(i, temp_k)
        return solve_point(excess, min(v_bound, 0.0), max(v_bound, 0.0), guess, xtol=1e-12)

    def _point_voltage_guess(self, i: float, temp_k: float) -> float | None:
        guess = self._voltage_guess(np.asarray(i, dtype=float), temp_k)
        return None if guess is None else float(guess)


@dataclass(frozen=True)
class Resistor(_Base):
    ohms: float

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        v = np.asarray(v, dtype=float)
        return v / self.ohms, np.full_like(v, 1.0 / self.ohms)

    def voltage_at(self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray:
        v = np.asarray(i, dtype=float) * self.ohms
        lo, hi = _bracket(v_bound, np.broadcast_shapes(v.shape, np.shape(v_bound)))
        return np.clip(v, lo, hi)

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair:
        return v / self.ohms, 1.0 / self.ohms

    def point_voltage_at(self, i: float, v_bound: float, temp_k: float = TNOM_K) -> float:
        return _clip_point(i * self.ohms, v_bound)


@dataclass(frozen=True)
class Diode(_Base):
    is_a: float = 1e-14
    n: float = 1.0
    eg_ev: float = 1.11
    xti: float = 3.0
    tnom_k: float = TNOM_K

    def is_at(self, temp_k: float) -> float:
        return saturation_current(self.is_a, temp_k, self.tnom_k, self.eg_ev, self.xti, self.n)

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        n_vt = self.n * thermal_voltage(temp_k)
        return junction(np.asarray(v, dtype=float), self.is_at(temp_k), n_vt)

    def voltage_at(self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray:
        ratio = np.asarray(i, dtype=float) / self.is_at(temp_k) + 1.0
        lo, hi = _bracket(v_bound, np.broadcast_shapes(ratio.shape, np.shape(v_bound)))
        # at or below -IS a junction cannot carry the current at any voltage: pin to the bound
        log = np.log(np.where(ratio > 0, ratio, 1.0))
        v = np.where(ratio > 0, self.n * thermal_voltage(temp_k) * log, -np.inf)
        return np.clip(v, lo, hi)

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair:
        return junction_point(v, self.is_at(temp_k), self.n * thermal_voltage(temp_k))

    def point_voltage_at(self, i: float, v_bound: float, temp_k: float = TNOM_K) -> float:
        ratio = i / self.is_at(temp_k) + 1.0
        v = self.n * thermal_voltage(temp_k) * math.log(ratio) if ratio > 0 else -math.inf
        return _clip_point(v, v_bound)


@dataclass(frozen=True)
class JfetParams:
    """Level-1 JFET parameters (SPICE names) plus the external source resistor."""

    idss_a: float
    vto_v: float
    lambda_per_v: float = 0.0
    rs_ohm: float = 0.0
    is_a: float = 1e-14
    tcv_v_per_k: float = 0.0
    bex: float = 0.0
    tnom_k: float = TNOM_K
    eg_ev: float = 1.11
    xti: float = 3.0

    def __post_init__(self) -> None:
        if not (self.idss_a > 0 and self.vto_v < 0 and self.lambda_per_v >= 0):
            raise ModelError(f"JFET needs IDSS > 0, VTO < 0, LAMBDA >= 0 (got {self})")
        if self.rs_ohm < 0 or self.is_a <= 0:
            raise ModelError(f"JFET needs RS >= 0 and IS > 0 (got {self})")

    @property
    def beta(self) -> float:
        """BETA = IDSS / VTO^2 (A/V^2)."""
        return self.idss_a / self.vto_v**2

    def at(self, temp_k: float) -> tuple[float, float]:
        """(VTO, BETA) at a temperature, by the SPICE level-1 temperature laws."""
        vto = self.vto_v - self.tcv_v_per_k * (temp_k - self.tnom_k)
        return vto, self.beta * (temp_k / self.tnom_k) ** self.bex

    def is_at(self, temp_k: float) -> float:
        """Gate-junction saturation current at a temperature (N = 1)."""
        return saturation_current(self.is_a, temp_k, self.tnom_k, self.eg_ev, self.xti)


@dataclass(frozen=True)
class JfetAt:
    """A JFET's constants at one temperature, worked out once rather than at every solve step."""

    vto: float
    beta: float
    lam: float
    rs: float
    is_t: float  # gate-junction saturation current IS(T)
    vt: float  # kT/q
    i_sat: float  # self_bias_current: where the source-node solve starts

    @classmethod
    def of(cls, p: JfetParams, temp_k: float) -> JfetAt:
        vto, beta = p.at(temp_k)
        i_sat = float(self_bias_current(p, temp_k))
        vt = thermal_voltage(temp_k)
        return cls(vto, beta, p.lambda_per_v, p.rs_ohm, p.is_at(temp_k), vt, i_sat)


def channel(vgs: np.ndarray, vgd: np.ndarray, p: JfetParams, temp_k: float):
    """Level-1 drain-to-source channel current and its partials d/dVGS, d/dVGD.

    In normal mode (VDS >= 0) the source end controls the channel, in inverse mode the drain end;
    F(overdrive, |VDS|) is the same square law either way.
    """
    vto, beta = p.at(temp_k)
    return _channel(vgs, vgd, vto, beta, p.lambda_per_v)


def _channel(vgs: np.ndarray, vgd: np.ndarray, vto: float, beta: float, lam: float):
    # Each branch is computed only where some element takes it: the same values as selecting
    # among all of them, for a fraction of the array operations when (as in a sweep) every
    # element is in one region.
    vds = vgs - vgd
    normal = vds >= 0
    all_normal = bool(normal.all())
    ov = np.where(normal, vgs, vgd) - vto
    x = np.abs(vds)
    gain = beta * (1.0 + lam * x)
    sat = x >= ov
    if sat.all():
        f, f_ov, f_x = gain * ov * ov, 2.0 * gain * ov, beta * lam * ov * ov
    elif not sat.any():
        f, f_ov = gain * x * (2.0 * ov - x), 2.0 * gain * x
        f_x = beta * lam * x * (2 * ov - x) + 2 * gain * (ov - x)
    else:
        f = np.where(sat, gain * ov * ov, gain * x * (2.0 * ov - x))
        f_ov = np.where(sat, 2.0 * gain * ov, 2.0 * gain * x)
        f_x = np.where(
            sat, beta * lam * ov * ov, beta * lam * x * (2 * ov - x) + 2 * gain * (ov - x)
        )
    on = ov > 0
    if not on.all():
        f, f_ov, f_x = np.where(on, f, 0.0), np.where(on, f_ov, 0.0), np.where(on, f_x, 0.0)
    if all_normal:
        return f, f_ov + f_x, -f_x
    current = np.where(normal, f, -f)
    d_vgs = np.where(normal, f_ov + f_x, f_x)
    d_vgd = np.where(normal, -f_x, -(f_ov + f_x))
    return current, d_vgs, d_vgd


def channel_point(
    vgs: float, vgd: float, vto: float, beta: float, lam: float
) -> tuple[float, float, float]:
    """`channel` on one operating point, given the constants at its temperature."""
    vds = vgs - vgd
    normal = vds >= 0
    ov = (vgs if normal else vgd) - vto
    if ov > 0:
        x = abs(vds)
        gain = beta * (1.0 + lam * x)
        if x >= ov:
            f, f_ov, f_x = gain * ov * ov, 2.0 * gain * ov, beta * lam * ov * ov
        else:
            f, f_ov = gain * x * (2.0 * ov - x), 2.0 * gain * x
            f_x = beta * lam * x * (2 * ov - x) + 2 * gain * (ov - x)
    else:
        f = f_ov = f_x = 0.0
    if normal:
        return f, f_ov + f_x, -f_x
    return -f, f_x, -(f_ov + f_x)


@dataclass(frozen=True)
class JfetRegulator(_Base):
    """A JFET with gate to cathode and source through RS to cathode: a two-terminal regulator."""

    params: JfetParams
    _at: dict[float, JfetAt] = field(
        default_factory=dict, init=False, repr=False, compare=False, hash=False
    )

    def constants(self, temp_k: float) -> JfetAt:
        """The parameters at `temp_k` (kept for the few temperatures a run uses)."""
        known = self._at.get(temp_k)
        if known is None:
            if len(self._at) >= 16:  # self-heating moves the temperature at every reading
                self._at.clear()
            known = self._at[temp_k] = JfetAt.of(self.params, temp_k)
        return known

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        v = np.asarray(v, dtype=float)
        k = self.constants(temp_k)
        vs = self._source_voltage(v, k)
        i_ch, d_vgs, d_vgd = _channel(-vs, -v, k.vto, k.beta, k.lam)
        i_gd, g_gd = junction(-v, k.is_t, k.vt)
        if k.rs == 0:
            return i_ch - i_gd, g_gd - d_vgd
        g_gs = junction(-vs, k.is_t, k.vt)[1]
        loop = 1.0 / k.rs + d_vgs + g_gs  # d(KCL residual)/d(vs), always > 0
        # the source node follows V: dvs/dV = -d_vgd / loop (implicit differentiation)
        return i_ch - i_gd, g_gd - d_vgd * (1.0 - d_vgs / loop)

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair:
        k = self.constants(temp_k)
        vs = self._point_source_voltage(v, k) if k.rs != 0 else 0.0
        i_ch, d_vgs, d_vgd = channel_point(-vs, -v, k.vto, k.beta, k.lam)
        i_gd, g_gd = junction_point(-v, k.is_t, k.vt)
        if k.rs == 0:
            return i_ch - i_gd, g_gd - d_vgd
        g_gs = junction_point(-vs, k.is_t, k.vt)[1]
        loop = 1.0 / k.rs + d_vgs + g_gs
        return i_ch - i_gd, g_gd - d_vgd * (1.0 - d_vgs / loop)

    def source_voltage(self, v: np.ndarray, temp_k: float = TNOM_K) -> np.ndarray:
        """Voltage of the internal source node: the one unknown of the self-bias loop."""
        return self._source_voltage(v, self.constants(temp_k))

    def _source_voltage(self, v: np.ndarray, k: JfetAt) -> np.ndarray:
        if k.rs == 0:
            return np.zeros_like(v)
        vgd = -v

        def excess_into_rs(vs: np.ndarray) -> Pair:
            # current through RS minus what the channel and the gate-source junction deliver to
            # the source node: increasing in vs, zero where Kirchhoff's current law holds
            i_ch, d_vgs, _ = _channel(-vs, vgd, k.vto, k.beta, k.lam)
            i_gs, g_gs = junction(-vs, k.is_t, k.vt)
            return vs / k.rs - i_ch - i_gs, 1.0 / k.rs + d_vgs + g_gs

        guess = _source_guess(v, k)
        return solve_increasing(excess_into_rs, np.minimum(v, 0.0), np.maximum(v, 0.0), guess)

    def _point_source_voltage(self, v: float, k: JfetAt) -> float:
        vgd, vto, beta, lam, rs, is_t, vt = -v, k.vto, k.beta, k.lam, k.rs, k.is_t, k.vt

        def excess_into_rs(vs: float) -> PointPair:
            i_ch, d_vgs, _ = channel_point(-vs, vgd, vto, beta, lam)
            i_gs, g_gs = junction_point(-vs, is_t, vt)
            return vs / rs - i_ch - i_gs, 1.0 / rs + d_vgs + g_gs

        return solve_point(excess_into_rs, min(v, 0.0), max(v, 0.0), _point_source_guess(v, k))

    def _voltage_guess(self, i: np.ndarray, temp_k: float) -> np.ndarray:
        # forward: the lambda = 0 limiting-voltage closed form (REFERENCES.md s2); reverse: the
        # gate-drain junction alone. Either is close, so the solve needs only a few steps.
        k = self.constants(temp_k)
        i_fwd = np.clip(i, 0.0, 0.999 * k.i_sat)
        g = -k.vto - i_fwd * k.rs
        v_fwd = i_fwd * k.rs + g - np.sqrt(np.maximum(g * g - i_fwd / k.beta, 0.0))
        v_rev = -k.vt * np.log1p(np.maximum(-i, 0.0) / k.is_t)
        return np.where(i >= 0, v_fwd, v_rev)

    def _point_voltage_guess(self, i: float, temp_k: float) -> float:
        k = self.constants(temp_k)
        if i < 0:
            return -k.vt * math.log1p(-i / k.is_t)
        i_fwd = min(i, 0.999 * k.i_sat)
        g = -k.vto - i_fwd * k.rs
        return i_fwd * k.rs + g - math.sqrt(max(g * g - i_fwd / k.beta, 0.0))


GUESS_PASSES = 2  # each pass cuts the guess's error about 300-fold (lambda 0.01 at 40 V)


def _point_source_guess(v: float, k: JfetAt) -> float:
    """Where the source-node solve starts: close enough that Newton's first step lands within
    about 1e-12 V, so the solve takes two steps instead of four or five.

    Forward (v > 0), without the gate junctions, KCL at the source node is a quadratic in vs
    once the channel-length factor 1 + lambda VDS is held fixed: with a = |VTO|, m = min(v, a)
    (the drain end pinches off at v = a) and b = BETA (1 + lambda (v - vs)),
        b vs^2 - (2 a b + 1/RS) vs + b m (2a - m) = 0,
    the linear-region law below a and the square law above it (at lambda = 0 and v >= a its
    smaller root is self_bias_current x RS, REFERENCES.md s2). Solving it, then again with
    lambda's factor at the new vs, leaves about 1e-6 of vs; the solver's own steps do the
    rest, so its answer does not depend on this guess beyond rounding. Reverse: as before.
    """
    plain = k.i_sat * k.rs
    if not v > 0:
        return plain
    a = -k.vto
    m = min(v, a)
    vs = min(plain, v)
    for _ in range(GUESS_PASSES):
        b = k.beta * (1.0 + k.lam * (v - vs))
        big = 2.0 * a * b + 1.0 / k.rs
        c = b * m * (2.0 * a - m)
        vs = 2.0 * c / (big + math.sqrt(big * big - 4.0 * b * c))
    return vs


def _source_guess(v: np.ndarray, k: JfetAt) -> np.ndarray | float:
    """`_point_source_guess` elementwise."""
    plain = k.i_sat * k.rs
    forward = v > 0
    if not forward.any():
        return plain
    a = -k.vto
    vf = np.maximum(v, 0.0)  # reverse elements are worked as 0 V, then replaced
    m = np.minimum(vf, a)
    vs = np.minimum(plain, vf)
    for _ in range(GUESS_PASSES):
        b = k.beta * (1.0 + k.lam * (vf - vs))
        big = 2.0 * a * b + 1.0 / k.rs
        c = b * m * (2.0 * a - m)
        vs = 2.0 * c / (big + np.sqrt(big * big - 4.0 * b * c))
    return np.where(forward, vs, plain)


def self_bias_current(p: JfetParams, temp_k: float = TNOM_K) -> float:
    """Saturated self-bias current for lambda = 0 (REFERENCES.md s2, the stable closed form)."""
    vto, beta = p.at(temp_k)
    idss = beta * vto * vto
    k = idss * p.rs_ohm / abs(vto)
    return 2.0 * idss / ((2.0 * k + 1.0) + np.sqrt(4.0 * k + 1.0))


@dataclass(frozen=True)
class Series(_Base):
    """Two devices in series, `first` at the anode: e.g. a blocking diode ahead of a regulator."""

    first: Device
    second: Device

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        v = np.asarray(v, dtype=float)

        def imbalance(v2: np.ndarray) -> Pair:
            # more voltage on `second` means more current through it and less through `first`
            i2, g2 = self.second.current_slope(v2, temp_k)
            i1, g1 = self.first.current_slope(v - v2, temp_k)
            return i2 - i1, g2 + g1

        # start from `second` carrying its own current at the full voltage: close for a regulator
        guess = v - self.first.voltage_at(self.second.current(v, temp_k), v, temp_k)
        v2 = solve_increasing(imbalance, np.minimum(v, 0.0), np.maximum(v, 0.0), guess)
        i2, g2 = self.second.current_slope(v2, temp_k)
        g1 = self.first.current_slope(v - v2, temp_k)[1]
        total = g1 + g2
        return i2, np.where(total > 0, g1 * g2 / np.where(total > 0, total, 1.0), 0.0)

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair:
        first, second = self.first, self.second

        def imbalance(v2: float) -> PointPair:
            i2, g2 = second.point_current_slope(v2, temp_k)
            i1, g1 = first.point_current_slope(v - v2, temp_k)
            return i2 - i1, g2 + g1

        guess = v - first.point_voltage_at(second.point_current(v, temp_k), v, temp_k)
        v2 = solve_point(imbalance, min(v, 0.0), max(v, 0.0), guess)
        i2, g2 = second.point_current_slope(v2, temp_k)
        g1 = first.point_current_slope(v - v2, temp_k)[1]
        total = g1 + g2
        return i2, (g1 * g2 / total if total > 0 else 0.0)

    def voltage_at(self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray:
        v = self.first.voltage_at(i, v_bound, temp_k) + self.second.voltage_at(i, v_bound, temp_k)
        lo, hi = _bracket(v_bound, v.shape)
        return np.clip(v, lo, hi)

    def point_voltage_at(self, i: float, v_bound: float, temp_k: float = TNOM_K) -> float:
        first, second = self.first, self.second
        v = first.point_voltage_at(i, v_bound, temp_k) + second.point_voltage_at(i, v_bound, temp_k)
        return _clip_point(v, v_bound)


@dataclass(frozen=True)
class Parallel(_Base):
    """Two devices side by side, e.g. a regulator with a leakage path across it."""

    first: Device
    second: Device

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        i1, g1 = self.first.current_slope(v, temp_k)
        i2, g2 = self.second.current_slope(v, temp_k)
        return i1 + i2, g1 + g2

    def point_current_slope(self, v: float, temp_k: float = TNOM_K) -> PointPair:
        i1, g1 = self.first.point_current_slope(v, temp_k)
        i2, g2 = self.second.point_current_slope(v, temp_k)
        return i1 + i2, g1 + g2


def regulator(params: JfetParams, blocking_diode: Diode | None = None) -> Device:
    """A JFET regulator, optionally behind a series blocking diode."""
    jfet = JfetRegulator(params)
    return jfet if blocking_diode is None else Series(blocking_diode, jfet)


def open_circuit() -> Resistor:
    return Resistor(OPEN_OHM)


def short_circuit() -> Resistor:
    return Resistor(SHORT_OHM)
