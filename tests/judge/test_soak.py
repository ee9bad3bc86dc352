"""The soak rule: within the band for the soak time, restarted by any reading outside it."""

from __future__ import annotations

import math

import pytest

from sequencer.judge.soak import SoakTracker


def test_stable_only_after_the_whole_soak_in_band():
    tracker = SoakTracker(85.0, 0.5, 60.0)
    assert not tracker.feed(0.0, 80.0)
    assert not tracker.feed(10.0, 84.6)  # in band from here
    assert not tracker.feed(69.0, 85.4)
    assert tracker.feed(70.0, 85.0)


def test_a_reading_outside_the_band_or_nan_restarts_the_wait():
    tracker = SoakTracker(85.0, 0.5, 60.0)
    tracker.feed(0.0, 85.0)
    tracker.feed(50.0, 85.6)
    assert not tracker.feed(70.0, 85.0)
    assert tracker.feed(130.0, 85.0)
    tracker.feed(140.0, math.nan)
    assert not tracker.stable and tracker.describe() == "approaching 85 degC"


def test_readings_out_of_time_order_are_refused():
    tracker = SoakTracker(25.0, 0.5, 60.0)
    tracker.feed(10.0, 25.0)
    with pytest.raises(ValueError):
        tracker.feed(5.0, 25.0)
