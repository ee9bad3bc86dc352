"""Each shipped family end to end as a user meets it: `ccbench check`, `ccbench probe` and
`ccbench run` on a small lot, against a responder of that family written from its description
(tests/instruments/standardsmu.py, families.py; never the simulator), over real TCP through
pyvisa-py. The lot holds two good regulators, a short and a device whose current is above the
compliance: the figures of the good ones are the textbook's (tests/support/textbook.py), the
short and the clamped one are caught, and the output ends off and read back."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest
from rich.console import Console

from instruments.dialect import DIALECT_DIR
from sequencer.cli.main import main
from tests.instruments.families import MainframeSmu, SenseProtectionSmu, SourceLimitSmu, SupplySmu
from tests.instruments.linkserver import serving
from tests.instruments.standardsmu import Regulator, Resistor, StandardSmu

GOOD = (Regulator(rs=600.0), Regulator(rs=520.0))
LOT = {1: GOOD[0], 2: GOOD[1], 3: Resistor(5.0), 4: Regulator(idss=20e-3, rs=100.0)}
FAMILIES = {
    "scpi1999": lambda: StandardSmu(devices=dict(LOT)),
    "source_limit_indexed_buffer": lambda: SourceLimitSmu(devices=dict(LOT)),
    "channel_suffix_mainframe": lambda: MainframeSmu(devices=dict(LOT)),
}
# What the run must have sent, as the family's command set has it (point by point; with lists).
SENT = {
    "scpi1999": (("SOUR:CURR:LIM",), ("SOUR:LIST:VOLT", "FETC?")),
    "source_limit_indexed_buffer": (("SOUR:VOLT:ILIM",), ("TRAC:DATA? 1,31", "*OPC?")),
    "channel_suffix_mainframe": (("SOUR4:CURR:LIM", "OUTP4 ON", "MEAS3?"), ()),  # no lists
}

RECIPE = """\
product: FLC-1.7 current limiter, 1.7 mA nominal
lot: FK2611-07
station: station.yaml
nplc: 1
lists: {lists}
steps:
  - sweep: {{name: iv, start: 0 V, stop: 30 V, points: 31, compliance: 5 mA}}
  - spot: {{name: at-test-voltage, voltage: 25 V, compliance: 5 mA, repeats: 3}}
judge:
  test_voltage: 25 V
  knee_voltage: 6 V
  slope_window: 4 V
  decision: simple
  limits:
    regulated_current: {{min: 1.4 mA, max: 2.2 mA}}
  bins:
    - {{bin: 1, class: pass, name: good}}
    - {{bin: 3, class: fail, classification: [open, short]}}
    - {{bin: 4, class: fail, classification: [compliance-limited]}}
    - {{bin: 5, class: fail}}
"""


def _files(folder: Path, resource: str, dialect: str, lists: bool, channels: str = "1-4") -> Path:
    path = DIALECT_DIR / f"{dialect}.yaml"
    (folder / "station.yaml").write_text(
        "station: family-bench\n"
        f'instrument: {{resource: "{resource}", timeout: 2 s, dialect: {path}}}\n'
        f"tray: {{channels: {channels}}}\n"
        "limits: {max_voltage: 40 V, max_current: 20 mA, max_power: 500 mW}\n"
    )
    recipe = folder / "recipe.yaml"
    recipe.write_text(RECIPE.format(lists=str(lists).lower()))
    return recipe


def _all_off(responder) -> bool:
    if isinstance(responder, MainframeSmu):
        return responder.most_on <= 1 and not any(responder.on(k) for k in responder.state)
    return not responder.output_on


def _ccbench(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), Console(file=out, width=200, highlight=False))
    return code, out.getvalue()


@pytest.mark.parametrize("lists", [False, True], ids=["point-by-point", "lists"])
@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_a_family_checks_probes_and_runs_a_small_lot(tmp_path: Path, family: str, lists) -> None:
    responder = FAMILIES[family]()
    with serving(responder.respond) as server:
        recipe = _files(tmp_path, server.resource, family, lists)
        code, text = _ccbench("check", str(recipe))
        assert code == 0, text
        code, text = _ccbench("probe", str(tmp_path / "station.yaml"))
        assert code == 0, text
        out = tmp_path / "run"
        code, text = _ccbench("run", str(recipe), "--out", str(out))
        assert code == 0, text
        assert _all_off(responder)
        sent = " ; ".join(server.received)
    always, with_lists = SENT[family]
    for text in always + (with_lists if lists else ()):
        assert text in sent, text
    with open(out / "devices.csv", newline="") as f:
        rows = {int(r["channel"]): r for r in csv.DictReader(f)}
    for channel, device in zip((1, 2), GOOD, strict=True):
        assert rows[channel]["verdict"] == "pass", rows[channel]
        # the regulated current at the test voltage: the textbook's, as the responder has it
        ip = float(rows[channel]["regulated_current_A"])
        assert ip == pytest.approx(device.current(25.0), rel=1e-4)
    assert rows[3]["verdict"] == "fail" and "short" in rows[3]["reasons"], rows[3]
    assert rows[4]["verdict"] == "fail" and "compliance" in rows[4]["reasons"], rows[4]


# Families without a switch matrix: one device on the terminals, so one run per device.
SINGLE = {
    "sense_protection_elements": SenseProtectionSmu,
    "supply_separate_queries": SupplySmu,
}


def _lines(respond):
    """A plainsmu.py responder (bytes ending in LF) as a linkserver.py one (text)."""

    def text(message: str) -> str | None:
        reply = respond(message)
        return None if reply is None else reply.decode().removesuffix("\n")

    return text


@pytest.mark.parametrize("family", sorted(SINGLE))
def test_a_family_without_a_switch_runs_each_kind_of_device(tmp_path: Path, family: str) -> None:
    verdicts = {}
    for channel, device in LOT.items():
        responder = SINGLE[family](device=device, errors=['-350,"Queue overflow"'])
        folder = tmp_path / f"device-{channel}"
        folder.mkdir()
        with serving(_lines(responder.respond)) as server:
            recipe = _files(folder, server.resource, family, False, channels="1")
            for argv in (("check", str(recipe)), ("probe", str(folder / "station.yaml"))):
                code, text = _ccbench(*argv)
                assert code == 0, text
            # this family's responder has no fixed ranges: a note, runs autorange
            ranges = "note: set_current_range was refused" in text
            assert ranges == (family == "sense_protection_elements"), text
            code, text = _ccbench("run", str(recipe), "--out", str(folder / "run"))
            assert code == 0, text
            assert not responder.output_on
        with open(folder / "run" / "devices.csv", newline="") as f:
            (verdicts[channel],) = list(csv.DictReader(f))
    for channel, device in zip((1, 2), GOOD, strict=True):
        assert verdicts[channel]["verdict"] == "pass", verdicts[channel]
        ip = float(verdicts[channel]["regulated_current_A"])
        assert ip == pytest.approx(device.current(25.0), rel=1e-4)
    assert "short" in verdicts[3]["reasons"] and "compliance" in verdicts[4]["reasons"]
