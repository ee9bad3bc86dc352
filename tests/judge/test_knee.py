"""The knee's two parabolas against numpy's own: np.polyfit through the same three points and
np.roots of p(V) = reference. The crossing is the parabola through k-1, k, k+1; its
interpolation uncertainty is half the distance to the one through k-2, k-1, k."""

from __future__ import annotations

import numpy as np
import pytest

from sequencer.judge import knee as knee_module


def crossing(v, i, good, ref):
    # As figures.compute calls it: a missing third point divides by zero, and is not used.
    with np.errstate(divide="ignore", invalid="ignore"):
        return knee_module.crossing(v, i, good, ref)


def _root(v: np.ndarray, i: np.ndarray, ref: float, low: float, high: float) -> float:
    """Where the parabola through three points reaches ref, between low and high (numpy)."""
    p = np.polyfit(v, i, 2)
    p[-1] -= ref
    real = [r.real for r in np.roots(p) if abs(r.imag) < 1e-12 and low <= r.real <= high]
    assert len(real) == 1
    return real[0]


@pytest.mark.parametrize("knee_v", [0.9, 1.1, 1.4])
@pytest.mark.parametrize("fraction", [0.5, 0.8])
def test_crossing_and_its_uncertainty_match_numpy_parabolas(knee_v, fraction):
    v = np.arange(0.0, 8.01, 0.5)
    i = 1.8e-3 * np.tanh(v / knee_v) ** 2  # a smooth rising current, bending at the knee
    ref = fraction * 1.8e-3
    knee = crossing(v[None], i[None], np.ones((1, v.size), bool), np.array([ref]))
    k = int(np.argmax(i >= ref))
    assert k >= 2
    right = _root(v[k - 1 : k + 2], i[k - 1 : k + 2], ref, v[k - 1], v[k])
    left = _root(v[k - 2 : k + 1], i[k - 2 : k + 1], ref, v[k - 1], v[k])
    assert knee.volts[0] == pytest.approx(right, rel=1e-9)
    assert knee.u_interpolation[0] == pytest.approx(abs(right - left) / 2, rel=1e-6)
    assert knee.slope[0] == pytest.approx((i[k] - i[k - 1]) / (v[k] - v[k - 1]), rel=1e-12)


def test_without_a_point_before_only_the_parabola_after_counts():
    v = np.arange(0.0, 8.01, 0.5)
    i = 1.8e-3 * np.tanh(v / 0.3) ** 2  # so steep that the reference is crossed at k = 1
    ref = 0.8 * 1.8e-3
    knee = crossing(v[None], i[None], np.ones((1, v.size), bool), np.array([ref]))
    k = int(np.argmax(i >= ref))
    assert k == 1  # there is no k-2
    right = _root(v[0:3], i[0:3], ref, v[0], v[1])
    chord = v[0] + (ref - i[0]) * (v[1] - v[0]) / (i[1] - i[0])  # straight-line crossing
    assert knee.volts[0] == pytest.approx(right, rel=1e-9)
    assert knee.u_interpolation[0] == pytest.approx(abs(right - chord), rel=1e-6)
