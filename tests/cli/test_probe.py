"""`ccbench probe` against responders of our own (tests/instruments/standardsmu.py, not the
simulator) over real TCP through pyvisa-py: every key tried with the output off, refusals named,
the output never switched on without --with-output, and always left off and read back."""

from __future__ import annotations

import io
from pathlib import Path

from rich.console import Console

from instruments.dialect import DIALECT_DIR
from sequencer.cli.main import main
from tests.instruments.linkserver import serving
from tests.instruments.standardsmu import Regulator, StandardSmu

PACKAGED = DIALECT_DIR / "scpi1999.yaml"


def _station(folder: Path, resource: str, dialect: Path = PACKAGED) -> Path:
    path = folder / "station.yaml"
    path.write_text(
        "station: probe-bench\n"
        f'instrument: {{resource: "{resource}", timeout: 1 s, dialect: {dialect}}}\n'
        "tray: {channels: 1-2}\n"
        "limits: {max_voltage: 60 V, max_current: 20 mA, max_power: 250 mW}\n"
    )
    return path


def _ccbench(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), Console(file=out, width=200, highlight=False))
    return code, out.getvalue()


def _probe(tmp_path: Path, responder: StandardSmu, *flags: str, dialect: Path = PACKAGED):
    with serving(responder.respond) as server:
        code, text = _ccbench("probe", str(_station(tmp_path, server.resource, dialect)), *flags)
        return code, text, server.received


def _outcome(text: str, key: str) -> str:
    line = next(row for row in text.splitlines() if row.split()[:1] == [key])
    return line.split()[1]


def test_a_standard_instrument_could_run_and_is_left_off(tmp_path: Path) -> None:
    responder = StandardSmu(devices={1: Regulator(), 2: Regulator()}, output_on=True)
    code, text, received = _probe(tmp_path, responder)
    assert code == 0, text
    assert "a run with this dialect could work" in text
    assert "output: off (read back)" in text
    for key in ("set_voltage", "set_current_limit", "select_channel", "list_voltage"):
        assert _outcome(text, key) == "accepted", text
    assert _outcome(text, "measure") == "untried"
    # SCPI-1999 has no interlock query: refused (its -113 named there, not at the next key),
    # a note, not a reason to refuse a run at touch-safe levels
    assert "note: interlock_query was refused" in text
    assert _outcome(text, "open_all_channels") == "accepted"
    assert not any(m.startswith("OUTP ON") for m in received)  # never switched on
    assert "OUTP?" in received[-4:] and not responder.output_on


def test_stale_errors_are_shown_not_blamed(tmp_path: Path) -> None:
    responder = StandardSmu(errors=['-350,"Queue overflow"'])
    code, text, _ = _probe(tmp_path, responder)
    assert code == 0, text
    assert "error queue at start (cleared): -350,Queue overflow" in text


def test_a_key_the_instrument_refuses_is_named_and_the_exit_is_not_zero(tmp_path: Path) -> None:
    dialect = tmp_path / "fields.yaml"
    text = PACKAGED.read_text()
    old = ':TRIG:COUN {count}"'
    assert old in text
    dialect.write_text(text.replace(old, ':TRIG:COUN {count};:FORM:FIEL VOLT,CURR"'))
    code, out, _ = _probe(tmp_path, StandardSmu(), dialect=dialect)
    assert code == 1, out
    assert _outcome(out, "list_voltage") == "refused"
    assert "cannot run: list_voltage was refused" in out and "-113" in out
    assert _outcome(out, "ascii_format") == "accepted"  # the refusal was not blamed on the next


def test_with_output_reads_at_zero_volts_only_then_off(tmp_path: Path) -> None:
    responder = StandardSmu()
    code, text, received = _probe(tmp_path, responder, "--with-output")
    assert code == 0, text
    assert "Caution" in text and "0 V into 0.02 A" in text
    assert _outcome(text, "measure") == "accepted" and _outcome(text, "initiate") == "accepted"
    assert responder.levels_applied and set(responder.levels_applied) == {0.0}
    assert "SOUR:CURR:LIM 2.000000E-02" in " ".join(received)
    assert not responder.output_on and "OUTP?" in received[-4:]


def test_an_instrument_without_idn_probes_with_identify_null(tmp_path: Path) -> None:
    dialect = tmp_path / "quiet.yaml"
    dialect.write_text(PACKAGED.read_text().replace('identify: "*IDN?"', "identify: null"))
    code, text, received = _probe(tmp_path, StandardSmu(answers_idn=False), dialect=dialect)
    assert code == 0, text
    assert _outcome(text, "identify") == "null"
    assert not any("IDN" in m for m in received)


def test_the_default_dialect_on_an_instrument_without_idn_is_one_line(tmp_path: Path) -> None:
    code, text, _ = _probe(tmp_path, StandardSmu(answers_idn=False))
    assert code == 4, text
    assert len(text.strip().splitlines()) == 1 and "*IDN?" in text
    assert "the output was not switched on" in text


def test_a_dialect_file_alone(tmp_path: Path) -> None:
    code, text = _ccbench("probe", "--dialect", str(PACKAGED))
    assert code == 0, text
    assert "valid dialect scpi1999; single readings: clamp told by status bit 1" in text
    broken = tmp_path / "broken.yaml"
    broken.write_text(PACKAGED.read_text().replace("binary_bits: null", "binary_bits: 48"))
    code, text = _ccbench("probe", "--dialect", str(broken))
    line = next(n for n, t in enumerate(broken.read_text().splitlines(), 1) if "binary_bits" in t)
    assert code == 2 and f"{broken}:{line}" in text and "binary_bits" in text, text
