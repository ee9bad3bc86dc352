"""Station link keys (sequencer/recipe/linkspec.py): the VISA library, terminators and a serial
line's settings, read into the instrument's spec; a bad one is one error naming file, line and
key, before anything is opened."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.linkspec import LinkSettings, SerialSettings
from sequencer.recipe.load import load_station

STATION = """\
station: serial-bench
instrument:
  resource: {resource}
{keys}tray: {{channels: 1}}
limits: {{max_voltage: 40 V, max_current: 20 mA, max_power: 500 mW}}
"""


def _station(tmp_path: Path, keys: str, resource: str = "ASRL/dev/ttyUSB0::INSTR") -> Path:
    path = tmp_path / "station.yaml"
    path.write_text(STATION.format(resource=resource, keys=keys))
    return path


def test_serial_settings_are_read(tmp_path: Path) -> None:
    keys = (
        "  read_termination: CR\n  write_termination: CRLF\n"
        "  serial: {baud: 19200, data_bits: 7, parity: even, stop_bits: 2, "
        "flow_control: rts_cts, echo: true}\n"
    )
    link = load_station(_station(tmp_path, keys)).instruments[0].link
    assert link == LinkSettings(
        "@py", "CR", "CRLF", SerialSettings(19200, 7, "even", 2, "rts_cts", True)
    )
    options = link.connect_options()
    assert options["terminators"] == ("CR", "CRLF") and options["serial"]["echo"] is True


def test_left_out_the_link_is_the_default(tmp_path: Path) -> None:
    link = load_station(_station(tmp_path, "")).instruments[0].link
    assert link == LinkSettings() and link.connect_options()["visa_library"] == "@py"


@pytest.mark.parametrize(
    ("keys", "where", "match"),
    [
        ("  serial: {parity: 7}\n", "instrument.serial.parity", "none, odd, even"),
        ("  serial: {baud: 9601}\n", "instrument.serial.baud", "must be one of"),
        ("  serial: {stop_bits: 3}\n", "instrument.serial.stop_bits", "1, 1.5 or 2"),
        ("  serial: {echo: yes please}\n", "instrument.serial.echo", "true or false"),
        ("  serial: {speed: 9600}\n", "instrument.serial.speed", "speed"),
        ("  read_termination: NL\n", "instrument.read_termination", "one of LF, CR, CRLF"),
    ],
)
def test_a_bad_link_key_names_its_place(tmp_path: Path, keys: str, where: str, match: str) -> None:
    path = _station(tmp_path, keys)
    with pytest.raises(RecipeError, match=match) as caught:
        load_station(path)
    assert str(path) in str(caught.value) and where in str(caught.value)


def test_serial_settings_for_a_socket_are_refused(tmp_path: Path) -> None:
    path = _station(tmp_path, "  serial: {baud: 9600}\n", '"TCPIP0::192.0.2.17::5025::SOCKET"')
    with pytest.raises(RecipeError, match=r"is for serial \(ASRL\) resources"):
        load_station(path)
