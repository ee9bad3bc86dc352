"""An independent textbook JFET self-bias model for checking the judge.

Equations: Shockley square law with channel-length modulation, self-bias through RS
[src: Sedra & Smith, Microelectronic Circuits; Boylestad & Nashelsky, Electronic Devices and
Circuit Theory; as summarised in shared REFERENCES.md s2]. Written apart from simulator/ so that
a mistake in one is not repeated in the other; scipy's brentq solves the series circuit.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq


def jfet_current(vgs: float, vds: float, idss: float, vp: float, lam: float) -> float:
    beta = idss / vp**2
    vov = vgs - vp  # vp < 0 for an n-channel part
    if vov <= 0:
        return 0.0
    if vds >= vov:
        return beta * vov**2 * (1 + lam * vds)
    return beta * (2 * vov * vds - vds**2) * (1 + lam * vds)


def self_biased_current(v: float, idss: float, vp: float, lam: float, rs: float) -> float:
    if v <= 0:
        return 0.0

    def f(i):
        return i - jfet_current(-i * rs, v - i * rs, idss, vp, lam)

    return brentq(f, 0.0, min(v / rs if rs else idss * 2, idss * 2), xtol=1e-16, rtol=1e-14)


def curve(voltages, idss=10e-3, vp=-3.0, lam=0.0, rs=1000.0) -> np.ndarray:
    return np.array([self_biased_current(float(v), idss, vp, lam, rs) for v in voltages])


def closed_form_current(idss: float, vp: float, rs: float) -> float:
    """ID = 2 IDSS / ((2k+1) + sqrt(4k+1)), k = IDSS RS / |VP| (lambda = 0) [REFERENCES.md s2]."""
    k = idss * rs / abs(vp)
    return 2 * idss / ((2 * k + 1) + np.sqrt(4 * k + 1))


def closed_form_vl(il: float, idss: float, vp: float, rs: float) -> float:
    """VL = IL RS + g - sqrt(g^2 - IL/BETA), g = |VP| - IL RS (lambda = 0) [REFERENCES.md s2]."""
    beta = idss / vp**2
    g = abs(vp) - il * rs
    return il * rs + g - np.sqrt(g**2 - il / beta)
