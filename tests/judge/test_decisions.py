"""Decision rules: simple and guarded acceptance (ILAC-G8), lower bounds, the guard-band verdict."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sequencer.judge.decide import (
    ABOVE,
    BELOW,
    GUARD_HIGH,
    GUARD_LOW,
    UNPROVEN,
    WITHIN,
    decide,
    limit_status,
)
from sequencer.judge.engine import judge_curve
from sequencer.judge.figures import FigureArrays
from sequencer.judge.uncertainty import acceptance_zone
from sequencer.model.curve import Curve
from sequencer.model.judgesettings import VERDICTS, FigureLimit, JudgeSettings
from tests.support.textbook import curve

IP_LIMIT = FigureLimit("regulated_current", 1.62e-3, 1.98e-3)


def test_ilac_g8_worked_example():
    # Limits 1.62 to 1.98 mA with U = 5 uA give acceptance 1.625 to 1.975 mA
    # [REFERENCES.md s5; src: ILAC-G8:09/2019, guarded acceptance w = U; computed]
    low, high = acceptance_zone(1.62e-3, 1.98e-3, 5e-6)
    assert low == pytest.approx(1.625e-3, rel=1e-12)
    assert high == pytest.approx(1.975e-3, rel=1e-12)


def _verdicts(values_a, u_a, decision):
    f = FigureArrays.empty(len(values_a))
    f.put("regulated_current", values_a, np.full(len(values_a), u_a))
    d = decide(f, JudgeSettings(limits=(IP_LIMIT,), decision=decision, coverage_factor=2.0))
    return [VERDICTS[v] for v in d.verdict]


@pytest.mark.parametrize(
    ("value_ma", "simple", "guarded"),
    [
        # [REFERENCES.md s5, the ILAC-G8 example: u = 2.5 uA, k = 2 -> U = 5 uA]
        (1.6190, "fail", "fail"),
        (1.6200, "pass", "guard-band"),
        (1.6249, "pass", "guard-band"),
        (1.6250, "pass", "pass"),
        (1.8000, "pass", "pass"),
        (1.9750, "pass", "pass"),
        (1.9751, "pass", "guard-band"),
        (1.9800, "pass", "guard-band"),
        (1.9801, "fail", "fail"),
    ],
)
def test_guard_band_of_the_worked_example(value_ma, simple, guarded):
    assert _verdicts([value_ma * 1e-3], 2.5e-6, "simple") == [simple]
    assert _verdicts([value_ma * 1e-3], 2.5e-6, "guarded") == [guarded]


def test_unknown_uncertainty_cannot_be_accepted_under_the_guarded_rule():
    assert _verdicts([1.8e-3], math.nan, "guarded") == ["guard-band"]
    assert _verdicts([1.8e-3], math.nan, "simple") == ["pass"]


@pytest.mark.parametrize(
    ("value", "at_least", "limit", "status"),
    [
        (30e6, True, FigureLimit("dynamic_impedance", 25e6, None), WITHIN),
        (20e6, True, FigureLimit("dynamic_impedance", 25e6, None), UNPROVEN),
        (20e6, True, FigureLimit("dynamic_impedance", None, 25e6), UNPROVEN),
        (30e6, True, FigureLimit("dynamic_impedance", None, 25e6), ABOVE),
        (20e6, False, FigureLimit("dynamic_impedance", 25e6, None), BELOW),
        (30e6, False, FigureLimit("dynamic_impedance", None, 25e6), ABOVE),
        (25.5e6, False, FigureLimit("dynamic_impedance", 25e6, None), GUARD_LOW),
        (24.5e6, False, FigureLimit("dynamic_impedance", None, 25e6), GUARD_HIGH),
    ],
)
def test_limit_status_table(value, at_least, limit, status):
    got = limit_status(np.array([value]), np.array([at_least]), np.array([1e6]), limit)
    assert got[0] == status


def test_judge_reports_the_guard_band_with_its_reason():
    v = np.arange(0.0, 40.0001, 0.25)
    c = Curve.from_sweep("g", v, curve(v, lam=0.01, rs=1000.0))
    probe = judge_curve(c, JudgeSettings())
    ip = probe.figures["regulated_current"]
    big_u = 2 * ip.uncertainty
    low = ip.value - big_u / 2  # the result sits half a U above the minimum
    limits = (FigureLimit("regulated_current", low, 2.5e-3),)
    guarded = judge_curve(c, JudgeSettings(limits=limits, decision="guarded"))
    assert guarded.verdict == "guard-band"
    assert guarded.reasons == ()
    (note,) = guarded.guard_band
    assert note.startswith("regulated current") and "guard band above min" in note
    assert "accepted from" in note
    assert guarded.hard_bin == 2 and guarded.bin_class == "fail"
    assert judge_curve(c, JudgeSettings(limits=limits)).verdict == "pass"
