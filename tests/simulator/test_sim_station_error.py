"""The station's reading error, set as simulator options for qualification studies: a gain
and an offset on every current reading, a spread drawn per contact, and a noise seed that
gives a repeat run its own noise on the same lot."""

from __future__ import annotations

import numpy as np
import pytest

from simulator import Session, SimOptions, build_instrument
from simulator.errors import OptionError


def session(**options) -> Session:
    return Session(build_instrument(SimOptions(clock="virtual", devices=3, **options)))


def current(s: Session, channel: int = 1) -> float:
    """Close the channel (a new contact), read at 25 V, open it again."""
    reply = s.handle(f"ROUT:CLOS (@{channel});:SOUR:VOLT 25;CURR:LIM 10 MA;:OUTP ON;:READ?")
    s.handle("OUTP OFF;:ROUT:OPEN:ALL")
    return float(reply.split(";")[0].split(",")[1])


def test_gain_and_offset_move_every_current_reading():
    plain, skewed = session(), session(reading_gain=0.01, range_offset=5e-4)
    a, b = current(plain), current(skewed)
    # Same lot, same noise stream (no spread set): only the set error differs (the offset is
    # a fraction of the 10 mA range).
    assert b == pytest.approx(a * 1.01 + 5e-4 * 10e-3, abs=2e-8)  # 6 digits in the reply


def test_contact_spread_is_drawn_anew_at_every_contact():
    s = session(contact_spread=0.002)
    readings = np.array([current(s) for _ in range(400)])
    assert readings.std(ddof=1) / readings.mean() == pytest.approx(0.002, rel=0.15)
    quiet = session()
    steady = np.array([current(quiet) for _ in range(50)])
    assert steady.std(ddof=1) / steady.mean() < 0.0002  # instrument noise alone


def test_noise_seed_changes_the_noise_not_the_lot():
    a = [current(session(contact_spread=0.002), ch) for ch in (1, 2, 3)]
    same = [current(session(contact_spread=0.002), ch) for ch in (1, 2, 3)]
    other = [current(session(contact_spread=0.002, noise_seed=7), ch) for ch in (1, 2, 3)]
    assert a == same  # a fresh simulator reads what the first read (resumed runs rely on it)
    assert a != other
    assert np.allclose(a, other, rtol=0.02)  # the same parts


@pytest.mark.parametrize(
    ("option", "value"),
    [
        ("reading_gain", 0.5),
        ("range_offset", 0.02),
        ("contact_spread", -0.1),
        ("noise_seed", -1),
    ],
)
def test_out_of_range_options_are_refused(option, value):
    with pytest.raises(OptionError, match=option):
        SimOptions(**{option: value})
