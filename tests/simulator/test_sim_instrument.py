"""SMU behaviour behind SCPI: clamp, ranges, noise, *RST, routing, interlock, timing, records."""

from __future__ import annotations

import numpy as np
import pytest

import simulator
from simulator import Session, SimOptions, build_instrument
from simulator.clock import RealClock
from simulator.instrument import Instrument
from tests.simulator.conftest import errors


def reading(session: Session, message: str = "READ?") -> tuple[float, float]:
    v, i = session.handle(message).split(";")[0].split(",")
    return float(v), float(i)


def exact(options: SimOptions | None = None) -> Session:
    """A session on a lot without process spread: every device is the preset itself."""
    return Session(build_instrument(options or SimOptions(clock="virtual", devices=3, spread=0.0)))


def test_identity_names_the_seed_and_version():
    s = Session(build_instrument(SimOptions(clock="virtual", seed=42)))
    assert s.handle("*IDN?") == f"CCBENCH,SIMULATED-SMU,SIM000042,{simulator.__version__}"
    assert s.handle("*TST?;*OPC?;SYST:VERS?") == "0;1;1999.0"


@pytest.mark.reference
def test_clamp_reports_the_voltage_at_the_limit_and_sets_ques_bit_1():
    s = exact()
    s.handle("ROUT:CLOS (@1);:SOUR:VOLT 25;CURR:LIM 1 MA;:OUTP ON")
    v, i = reading(s)
    assert i == pytest.approx(1e-3, abs=5 * 5e-9)  # 5 sigma of 5 ppm of the 1 mA range
    # REFERENCES.md s2 closed form, lambda = 0, IL = 1 mA, RS = 1k: VL = 1.2393 V; the preset's
    # lambda = 0.01 moves it by under 1 mV [computed]
    assert v == pytest.approx(1.2393, abs=1.5e-3)
    assert s.handle("STAT:QUES:COND?") == "2"
    s.handle("CURR:LIM 10 MA")
    v, i = reading(s)
    assert v == pytest.approx(25.0, abs=5 * 50e-6) and i == pytest.approx(1.84033e-3, rel=1e-4)
    assert s.handle("STAT:QUES:COND?") == "0"
    assert s.handle("STAT:QUES?;:STAT:QUES?") == "2;0"  # latched event, cleared by the read


@pytest.mark.reference
def test_reverse_clamp_at_the_diode_like_drop():
    s = exact()
    s.handle("ROUT:CLOS (@1);:VOLT -5;:CURR:LIM 1E-3;:OUTP ON")
    v, i = reading(s, "READ?;:STAT:QUES:COND?")
    assert i == pytest.approx(-1e-3, abs=25e-9)
    assert -0.70 < v < -0.60  # REFERENCES.md s1/s3: conducts like a forward diode [src]
    assert s.handle("STAT:QUES:COND?") == "2"


def test_clamped_voltage_draws_exactly_the_limit(inst: Instrument, session: Session):
    session.handle("ROUT:CLOS (@2);:VOLT 30;:CURR:LIM 0.5E-3;:OUTP ON")
    v, _ = reading(session)
    device = inst.lot.at(2).device
    # within the voltage noise (5 x 50 uV) times the device's slope there
    slope = float(device.current_slope(v)[1])
    assert float(device.current(v)) == pytest.approx(0.5e-3, abs=5 * 50e-6 * slope + 1e-12)


def test_auto_range_and_fixed_range_overflow():
    s = exact()
    s.handle("ROUT:CLOS (@1);:VOLT 25;:CURR:LIM 10 MA;:OUTP ON")
    reading(s)
    assert s.handle("SENS:CURR:RANG?") == "+1.000000E-02"  # smallest range >= 1.84 mA
    s.handle("SENS:CURR:RANG 5E-4")  # picks the 1 mA range, turns auto off
    assert s.handle("SENS:CURR:RANG?;RANG:AUTO?") == "+1.000000E-03;0"
    assert reading(s)[1] == 9.9e37  # 1.84 mA > 1.05 x 1 mA: SCPI INF
    s.handle("SENS:CURR:RANG MAX")
    assert reading(s)[1] == pytest.approx(1.84e-3, rel=1e-2)
    s.handle("VOLT -5;:SENS:CURR:RANG 1E-6")
    assert reading(s)[1] == -9.9e37  # a negative overflow reads NINF
    s.handle("SENS:CURR:RANG:AUTO ON")
    assert reading(s)[1] == pytest.approx(-10e-3, rel=1e-4)


def test_output_off_or_no_channel_reads_zero_within_noise(session: Session):
    for setup in ("ROUT:CLOS (@1);:VOLT 10", "ROUT:OPEN:ALL;:OUTP ON"):
        session.handle(setup)
        v, i = reading(session)
        assert abs(v) < 5 * 50e-6 and abs(i) < 5 * 5e-6 * 1e-6


def test_noise_is_gaussian_at_the_documented_level_and_scales_with_nplc(session: Session):
    def spread(n: int = 300) -> tuple[float, float]:
        values = np.array([reading(session) for _ in range(n)])
        return values[:, 0].std(ddof=1), values[:, 1].std(ddof=1)

    sv, si = spread()
    assert sv == pytest.approx(50e-6, rel=0.15) and si == pytest.approx(5e-12, rel=0.2)
    session.handle("SENS:CURR:NPLC 0.25")
    sv4, _ = spread()
    assert sv4 == pytest.approx(2 * sv, rel=0.25)  # 1/sqrt(NPLC)


def test_same_seed_gives_the_same_readings_and_another_seed_does_not():
    def run(seed: int) -> list[str]:
        s = Session(build_instrument(SimOptions(clock="virtual", seed=seed, devices=3)))
        s.handle("ROUT:CLOS (@2);:VOLT 25;:CURR:LIM 0.1;:OUTP ON")
        return [s.handle("READ?") for _ in range(5)]

    assert run(3) == run(3)
    assert run(3) != run(4)


def test_measure_queries_and_fetch(session: Session):
    session.handle("ROUT:CLOS (@1);:VOLT 20;:CURR:LIM 0.1;:OUTP ON")
    assert float(session.handle("MEAS:CURR?")) == pytest.approx(1.8e-3, rel=0.2)
    assert float(session.handle("MEASure:SCALar:VOLTage:DC?")) == pytest.approx(20, abs=1e-3)
    last = session.handle("READ?")
    assert session.handle("FETC?") == last
    session.handle("VOLT 21")
    assert session.handle("FETC?") is None
    assert errors(session) == [-230]


def test_reset_restores_the_documented_state(session: Session):
    session.handle("ROUT:CLOS (@2);:VOLT 12;:CURR:LIM 5E-3;:OUTP ON;:TRIG:DEL 0.2")
    session.handle("SENS:CURR:NPLC 5;RANG 1E-4")
    session.handle("*RST")
    reply = session.handle("OUTP?;:VOLT?;:CURR:LIM?;:SENS:CURR:NPLC?;RANG:AUTO?;:TRIG:DEL?")
    assert reply == "0;+0.000000E+00;+1.000000E-03;+1.000000E+00;1;+0.000000E+00"
    assert session.handle("ROUT:CLOS:STAT?") == "(@)"


def test_route_is_break_before_make_and_refuses_hot_switching(inst: Instrument, session: Session):
    session.handle("ROUT:CLOS (@2)")
    session.handle("ROUT:CLOS (@4)")
    assert inst.tray.history == [("close", 2), ("open", 2), ("close", 4)]
    session.handle("VOLT 5;:OUTP ON;:ROUT:CLOS (@1)")
    assert errors(session) == [-221]
    assert session.handle("ROUT:CLOS:STAT?") == "(@4)"
    session.handle("VOLT 1;:ROUT:CLOS (@1)")  # 1 V is not above the 1 V hot-switch threshold
    assert session.handle("ROUT:CLOS:STAT?") == "(@1)"
    session.handle("ROUT:CLOS (@6)")
    session.handle("ROUT:CLOS (@0)")
    session.handle("ROUT:CLOS (@1,2)")
    assert errors(session) == [-222, -222, -221]
    session.handle("ROUT:OPEN:ALL")
    assert session.handle("ROUT:CLOS:STAT?") == "(@)"
    assert session.handle("SIM:TRAY:COUN?") == "5"


def test_interlock_refuses_hazardous_levels_while_the_lid_is_open(session: Session):
    assert session.handle("SYST:INT?;:SIM:LID?") == "1;CLOS"
    session.handle("SIM:LID OPEN")
    assert session.handle("SYST:INT?") == "0"
    session.handle("VOLT 50")
    session.handle("VOLT -42.5")
    assert errors(session) == [-221, -221]
    assert session.handle("VOLT?") == "+0.000000E+00"  # not applied
    session.handle("VOLT 42")  # the threshold itself is touch-safe
    assert errors(session) == []
    session.handle("SIM:LID CLOSED;:VOLT 50;:SIM:LID OPEN")  # programmed, output still off
    session.handle("OUTP ON")
    assert errors(session) == [-221]
    assert session.handle("OUTP?") == "0"


def test_opening_the_lid_forces_a_hazardous_output_off(inst: Instrument, session: Session):
    session.handle("VOLT 60;:OUTP ON")
    session.handle("SIM:LID OPEN")
    assert session.handle("OUTP?") == "0"
    session.handle("SIM:LID CLOS;:VOLT 12;:OUTP ON;:SIM:LID OPEN")
    assert session.handle("OUTP?") == "1"  # 12 V is touch-safe: left on


def test_every_applied_level_is_recorded(inst: Instrument, session: Session):
    session.handle("VOLT 1;:OUTP ON;:VOLT 5;:VOLT -10;:OUTP OFF;:VOLT 60")
    assert inst.smu.applied_levels == [1.0, 5.0, -10.0]
    assert session.handle("SIM:LEV:MAX?;COUN?") == "+1.000000E+01;3"


def test_virtual_clock_adds_up_acquisition_and_command_time(session: Session):
    session.handle("SENS:CURR:NPLC 2;:TRIG:DEL 0.1;:SYST:LFR 60")
    before = float(session.handle("SIM:BUSY?"))
    session.handle("READ?")
    after = float(session.handle("SIM:BUSY?"))
    # wire contract: delay + NPLC / line frequency per acquisition; 50 us per message unit
    assert after - before == pytest.approx(0.1 + 2 / 60 + 2 * 50e-6, abs=1e-9)


class FakeTime:
    """A monotonic clock that moves by `compute_s` at every reading (the simulator's own work)
    and by every sleep."""

    def __init__(self, compute_s: float) -> None:
        self.t, self.compute_s, self.slept = 100.0, compute_s, []

    def now(self) -> float:
        self.t += self.compute_s
        return self.t

    def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)
        self.t += seconds


@pytest.mark.parametrize("compute_s", [0.0, 0.004])
def test_real_clock_sleeps_for_the_acquisition_less_its_compute_time(
    inst: Instrument, session: Session, compute_s: float
):
    fake = FakeTime(compute_s)
    inst.smu.clock = RealClock(sleep=fake.sleep, now=fake.now)
    session.handle("SENS:CURR:NPLC 1;:TRIG:DEL 0.01;:READ?")
    modelled = 0.01 + 1 / 50 + 3 * 50e-6  # delay + aperture + 3 message units
    assert inst.clock.busy_s == pytest.approx(modelled, abs=1e-12)
    # one sleep at the end of the message, shortened by the time the message took to compute
    assert fake.slept == [pytest.approx(modelled - compute_s, abs=1e-12)]


def test_real_clock_outside_a_message_sleeps_at_once():
    fake = FakeTime(0.0)
    clock = RealClock(sleep=fake.sleep, now=fake.now)
    clock.spend(0.25)
    clock.spend(0.5)
    assert fake.slept == [pytest.approx(0.25), pytest.approx(0.5)]


def test_two_sessions_share_one_instrument(inst: Instrument):
    first, second = Session(inst), Session(inst)
    first.handle("VOLT 3;:OUTP ON")
    assert second.handle("OUTP?;:VOLT?") == "1;+3.000000E+00"


def test_source_mode_current_is_refused(session: Session):
    session.handle("FUNC:MODE CURR")
    assert errors(session) == [-224]
    assert session.handle("FUNC:MODE?") == "VOLT"
