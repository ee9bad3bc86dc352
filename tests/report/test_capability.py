"""Capability indices and fallout against the handbook formulas and scipy's normal law."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import norm

from sequencer.report.capability import capability, cp, cpk, cpk_interval, fallout_ppm, observed_ppm


def sample_with(mean: float, s: float, n: int = 40) -> np.ndarray:
    """n values whose sample mean and standard deviation are exactly `mean` and `s`."""
    z = np.random.default_rng(3).normal(size=n)
    z = (z - z.mean()) / z.std(ddof=1)
    return mean + s * z


@pytest.mark.reference
def test_worked_example_cp_and_cpk():
    # REFERENCES.md s5 [computed from NIST/SEMATECH e-Handbook 6.1.6 formulas]:
    # USL 20, LSL 8, mean 16, s 2 -> Cp 1.000, Cpk 0.6667
    assert cp(8, 20, 2) == pytest.approx(1.000, abs=5e-4)
    assert cpk(8, 20, 16, 2) == pytest.approx(0.6667, abs=5e-5)
    c = capability(sample_with(16, 2), 8, 20)
    assert (c.cp, c.cpk) == (pytest.approx(1.0), pytest.approx(2 / 3))
    assert (c.mean, c.s) == (pytest.approx(16), pytest.approx(2))


@pytest.mark.reference
@pytest.mark.parametrize(("index", "ppm"), [(1.00, 2700), (1.33, 66), (1.50, 6.8)])
def test_centred_process_fallout(index, ppm):
    # REFERENCES.md s5 [computed]: Cpk 1.00 / 1.33 / 1.50 centred -> 2700 / 66 / 6.8 ppm
    s = 1.0
    lsl, usl = -3 * index * s, 3 * index * s
    assert cpk(lsl, usl, 0.0, s) == pytest.approx(index)
    got = fallout_ppm(lsl, usl, 0.0, s)
    assert got == pytest.approx(ppm, rel=0.01)
    # the same against scipy.stats.norm, independently of our erfc
    assert got == pytest.approx(1e6 * (norm.cdf(lsl) + norm.sf(usl)), rel=1e-9)


@pytest.mark.reference
@settings(max_examples=60, deadline=None)
@given(
    mean=st.floats(-5, 5),
    s=st.floats(0.05, 5),
    low=st.one_of(st.none(), st.floats(-20, 0)),
    high=st.one_of(st.none(), st.floats(0.1, 20)),
)
def test_fallout_matches_scipy_norm(mean, s, low, high):
    # normal-model fallout [src: NIST/SEMATECH e-Handbook 6.1.6] against scipy.stats.norm
    if low is None and high is None:
        assert math.isnan(fallout_ppm(low, high, mean, s))
        return
    expected = (norm.cdf(low, mean, s) if low is not None else 0.0) + (
        norm.sf(high, mean, s) if high is not None else 0.0
    )
    assert fallout_ppm(low, high, mean, s) == pytest.approx(1e6 * expected, rel=1e-9, abs=1e-12)


@pytest.mark.reference
def test_one_sided_limits_use_their_side_only():
    # NIST/SEMATECH 6.1.6: Cpu = (USL - mean)/3s, Cpl = (mean - LSL)/3s; Cp needs both limits
    x = sample_with(10, 1)
    upper, lower = capability(x, None, 16), capability(x, 7, None)
    assert upper.cpk == pytest.approx(2.0) and math.isnan(upper.cp)
    assert lower.cpk == pytest.approx(1.0) and math.isnan(lower.cp)
    assert upper.ppm == pytest.approx(1e6 * norm.sf(6))
    assert lower.ppm == pytest.approx(1e6 * norm.cdf(-3))


@pytest.mark.reference
def test_bissell_interval_covers_the_true_cpk_about_95_percent():
    # Bissell's approximation (NIST/SEMATECH 6.1.6, from memory), checked by simulation:
    # 4000 samples of 50 from a process of true Cpk 1.0; the 95 % interval should hold it in
    # about 95 % of them (binomial standard error 0.35 %; the approximation is good to ~1 %).
    rng = np.random.default_rng(11)
    n, reps, true = 50, 4000, 1.0
    x = rng.normal(0.0, 1.0, (reps, n))
    mean, s = x.mean(axis=1), x.std(axis=1, ddof=1)
    est = np.minimum(3 - mean, mean + 3) / (3 * s)  # limits +-3, so true Cpk = 1
    bounds = [cpk_interval(float(e), n) for e in est]
    hits = np.mean([lo <= true <= hi for lo, hi in bounds])
    assert 0.93 <= hits <= 0.97


def test_interval_width_follows_the_formula():
    # Cpk +- z sqrt(1/(9n) + Cpk^2/(2(n-1))), z = 1.95996 for 95 % (norm.ppf(0.975))
    low, high = cpk_interval(1.33, 30)
    half = norm.ppf(0.975) * math.sqrt(1 / 270 + 1.33**2 / 58)
    assert (low, high) == (pytest.approx(1.33 - half), pytest.approx(1.33 + half))


def test_too_few_values_give_no_indices():
    one = capability(np.array([1.0]), 0.0, 2.0)
    assert one.n == 1 and math.isnan(one.cpk) and math.isnan(one.cpk_low)
    flat = capability(np.array([1.0, 1.0, 1.0]), 0.0, 2.0)
    assert math.isnan(flat.cpk) and math.isnan(flat.ppm)
    assert capability(np.array([np.nan, 1.0, 2.0]), 0.0, 3.0).n == 2


def test_observed_ppm_counts_values_outside():
    x = np.array([1.0, 2.0, 3.0, 4.0, np.nan])
    assert observed_ppm(x, 1.5, 3.5) == pytest.approx(500_000)
    assert observed_ppm(x, None, 3.5) == pytest.approx(250_000)
    assert math.isnan(observed_ppm(x, None, None))


def test_no_index_from_a_handful_of_parts():
    # Two parts (an operator's first two tests) give no capability index at all.
    from sequencer.report.capability import MIN_SAMPLES, capability

    few = capability(np.array([1.80e-3, 1.90e-3]), 1.62e-3, 1.98e-3)
    assert np.isnan(few.cpk) and np.isnan(few.cp) and few.n == 2
    enough = capability(np.linspace(1.7e-3, 1.9e-3, MIN_SAMPLES), 1.62e-3, 1.98e-3)
    assert np.isfinite(enough.cpk)
