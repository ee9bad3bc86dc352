"""The chamber driver against a small responder written from the description of the commands in
dialects/chamber_text.yaml (not from the simulator): set point read back, sensor range, errors."""

from __future__ import annotations

from pathlib import Path

import pytest

from instruments.chamber import TextChamber
from instruments.chamber_dialect import load_chamber_dialect, parse_chamber_dialect
from instruments.errors import DialectError, InstrumentError, ScpiError, SensorFault
from instruments.loopback import CallableTransport


class Responder:
    """A chamber as the dialect file describes it: one line per command, degC, errors queued."""

    def __init__(self) -> None:
        self.set_point = 25.0
        self.air = 23.0
        self.mount = 23.5
        self.running = False
        self.door = False
        self.clamp_at: float | None = None  # a chamber that silently keeps its own maximum
        self.errors: list[str] = []
        self.sent: list[str] = []

    def __call__(self, message: str) -> str | None:
        self.sent.append(message)
        head, _, arg = message.partition(" ")
        if head == "SETPOINT":
            value = float(arg)
            self.set_point = min(value, self.clamp_at) if self.clamp_at is not None else value
            return None
        if head == "RUN" and arg in ("0", "1"):
            self.running = arg == "1"
            return None
        replies = {
            "*IDN?": "responder,chamber,0,1",
            "SETPOINT?": f"{self.set_point:.2f}",
            "TEMP?": repr(self.air),
            "MOUNT?": repr(self.mount),
            "RUN?": "1" if self.running else "0",
            "DOOR?": "1" if self.door else "0",
            "ERR?": self.errors.pop(0) if self.errors else '0,"no error"',
        }
        if message in replies:
            return replies[message]
        self.errors.append('-100,"unknown command"')
        return None


@pytest.fixture
def rig() -> tuple[TextChamber, Responder]:
    responder = Responder()
    dialect = load_chamber_dialect("chamber_text")
    return TextChamber(CallableTransport(responder), dialect), responder


def test_set_point_is_sent_in_nr3_and_read_back(rig):
    chamber, responder = rig
    assert chamber.set_point(85.0) == pytest.approx(85.0)
    assert "SETPOINT 8.500000E+01" in responder.sent and "SETPOINT?" in responder.sent


def test_a_clamped_set_point_is_refused(rig):
    chamber, responder = rig
    responder.clamp_at = 60.0
    with pytest.raises(InstrumentError, match="reads back 60"):
        chamber.set_point(85.0)


def test_readings_start_stop_and_door(rig):
    chamber, responder = rig
    assert chamber.temperature() == 23.0 and chamber.fixture_temperature() == 23.5
    chamber.start()
    assert chamber.running() is True and responder.running
    chamber.stop()
    assert chamber.running() is False
    responder.door = True
    assert chamber.door_open() is True


def test_an_off_scale_reading_is_a_sensor_fault_not_a_temperature(rig):
    chamber, responder = rig
    responder.air = 9.9e37  # an open thermocouple reads full scale (common practice, no source)
    with pytest.raises(SensorFault, match=r"outside -100\.\.300"):
        chamber.temperature()


def test_a_queued_error_is_raised_with_its_command(rig):
    chamber, responder = rig
    responder.errors.append('-222,"data out of range"')
    with pytest.raises(ScpiError, match="-222"):
        chamber.start()


def test_make_safe_sets_and_reads_back_or_stops(rig):
    chamber, responder = rig
    line = chamber.make_safe(25.0)
    assert responder.running and responder.set_point == 25.0 and "read back" in line
    line = chamber.make_safe(None)
    assert not responder.running and line.startswith("chamber stopped, reads 23.0")


def test_dialect_errors_name_the_key_and_line(tmp_path):
    text = tmp_path / "x.yaml"
    good = load_chamber_dialect("chamber_text")
    assert good.set_point == "SETPOINT {celsius}"
    original = Path(good.source).read_text(encoding="utf-8")
    bad = original.replace("SETPOINT {celsius}", "SETPOINT 25")
    with pytest.raises(DialectError, match=r"set_point.*\{celsius\}") as info:
        parse_chamber_dialect(bad, text)
    assert info.value.line is not None
    with pytest.raises(DialectError, match="valid_range_c"):
        parse_chamber_dialect(
            bad.replace("SETPOINT 25", "SETPOINT {celsius}").replace(
                "[-100.0, 300.0]", "[300, -100]"
            ),
            text,
        )
