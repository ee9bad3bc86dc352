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
All accept and return numpy arrays.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike

from simulator.errors import ModelError
from simulator.solve import solve_increasing

BOLTZMANN = 1.380649e-23  # J/K, exact (SI 2019)
ELEMENTARY_CHARGE = 1.602176634e-19  # C, exact (SI 2019)
TNOM_K = 300.15  # 27 C, the SPICE default nominal and circuit temperature
EXP_LIMIT = 80.0  # exponents are clipped to +/-80; above, currents continue linearly (monotone)
OPEN_OHM = 1e12  # an open device still leaks a little, which keeps every model strictly monotone
SHORT_OHM = 0.5

Pair = tuple[np.ndarray, np.ndarray]


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


class Device(Protocol):
    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair: ...

    def current(self, v: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray: ...

    def voltage_at(
        self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K
    ) -> np.ndarray: ...


def _bracket(v_bound: ArrayLike, shape: tuple[int, ...]) -> Pair:
    vb = np.broadcast_to(np.asarray(v_bound, dtype=float), shape)
    return np.minimum(vb, 0.0), np.maximum(vb, 0.0)


class _Base:
    """Shared derived operations: current from current_slope, voltage_at by a bracketed solve."""

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


def channel(vgs: np.ndarray, vgd: np.ndarray, p: JfetParams, temp_k: float):
    """Level-1 drain-to-source channel current and its partials d/dVGS, d/dVGD.

    In normal mode (VDS >= 0) the source end controls the channel, in inverse mode the drain end;
    F(overdrive, |VDS|) is the same square law either way.
    """
    vto, beta = p.at(temp_k)
    lam = p.lambda_per_v
    vds = vgs - vgd
    normal = vds >= 0
    ov = np.where(normal, vgs, vgd) - vto
    x = np.abs(vds)
    gain = beta * (1.0 + lam * x)
    sat = x >= ov
    f = np.where(sat, gain * ov * ov, gain * x * (2.0 * ov - x))
    f_ov = np.where(sat, 2.0 * gain * ov, 2.0 * gain * x)
    f_x = np.where(sat, beta * lam * ov * ov, beta * lam * x * (2 * ov - x) + 2 * gain * (ov - x))
    on = ov > 0
    f, f_ov, f_x = np.where(on, f, 0.0), np.where(on, f_ov, 0.0), np.where(on, f_x, 0.0)
    current = np.where(normal, f, -f)
    d_vgs = np.where(normal, f_ov + f_x, f_x)
    d_vgd = np.where(normal, -f_x, -(f_ov + f_x))
    return current, d_vgs, d_vgd


@dataclass(frozen=True)
class JfetRegulator(_Base):
    """A JFET with gate to cathode and source through RS to cathode: a two-terminal regulator."""

    params: JfetParams

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        v = np.asarray(v, dtype=float)
        p = self.params
        vs = self.source_voltage(v, temp_k)
        i_ch, d_vgs, d_vgd = channel(-vs, -v, p, temp_k)
        is_t = p.is_at(temp_k)
        i_gd, g_gd = junction(-v, is_t, thermal_voltage(temp_k))
        if p.rs_ohm == 0:
            return i_ch - i_gd, g_gd - d_vgd
        g_gs = junction(-vs, is_t, thermal_voltage(temp_k))[1]
        loop = 1.0 / p.rs_ohm + d_vgs + g_gs  # d(KCL residual)/d(vs), always > 0
        # the source node follows V: dvs/dV = -d_vgd / loop (implicit differentiation)
        return i_ch - i_gd, g_gd - d_vgd * (1.0 - d_vgs / loop)

    def source_voltage(self, v: np.ndarray, temp_k: float = TNOM_K) -> np.ndarray:
        """Voltage of the internal source node: the one unknown of the self-bias loop."""
        p = self.params
        if p.rs_ohm == 0:
            return np.zeros_like(v)
        n_vt, is_t = thermal_voltage(temp_k), p.is_at(temp_k)

        def excess_into_rs(vs: np.ndarray) -> Pair:
            # current through RS minus what the channel and the gate-source junction deliver to
            # the source node: increasing in vs, zero where Kirchhoff's current law holds
            i_ch, d_vgs, _ = channel(-vs, -v, p, temp_k)
            i_gs, g_gs = junction(-vs, is_t, n_vt)
            return vs / p.rs_ohm - i_ch - i_gs, 1.0 / p.rs_ohm + d_vgs + g_gs

        guess = self_bias_current(p, temp_k) * p.rs_ohm
        return solve_increasing(excess_into_rs, np.minimum(v, 0.0), np.maximum(v, 0.0), guess)

    def _voltage_guess(self, i: np.ndarray, temp_k: float) -> np.ndarray:
        # forward: the lambda = 0 limiting-voltage closed form (REFERENCES.md s2); reverse: the
        # gate-drain junction alone. Either is close, so the solve needs only a few steps.
        p = self.params
        vto, beta = p.at(temp_k)
        i_fwd = np.clip(i, 0.0, 0.999 * self_bias_current(p, temp_k))
        g = -vto - i_fwd * p.rs_ohm
        v_fwd = i_fwd * p.rs_ohm + g - np.sqrt(np.maximum(g * g - i_fwd / beta, 0.0))
        v_rev = -thermal_voltage(temp_k) * np.log1p(np.maximum(-i, 0.0) / p.is_at(temp_k))
        return np.where(i >= 0, v_fwd, v_rev)


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

    def voltage_at(self, i: ArrayLike, v_bound: ArrayLike, temp_k: float = TNOM_K) -> np.ndarray:
        v = self.first.voltage_at(i, v_bound, temp_k) + self.second.voltage_at(i, v_bound, temp_k)
        lo, hi = _bracket(v_bound, v.shape)
        return np.clip(v, lo, hi)


@dataclass(frozen=True)
class Parallel(_Base):
    """Two devices side by side, e.g. a regulator with a leakage path across it."""

    first: Device
    second: Device

    def current_slope(self, v: ArrayLike, temp_k: float = TNOM_K) -> Pair:
        i1, g1 = self.first.current_slope(v, temp_k)
        i2, g2 = self.second.current_slope(v, temp_k)
        return i1 + i2, g1 + g2


def regulator(params: JfetParams, blocking_diode: Diode | None = None) -> Device:
    """A JFET regulator, optionally behind a series blocking diode."""
    jfet = JfetRegulator(params)
    return jfet if blocking_diode is None else Series(blocking_diode, jfet)


def open_circuit() -> Resistor:
    return Resistor(OPEN_OHM)


def short_circuit() -> Resistor:
    return Resistor(SHORT_OHM)
