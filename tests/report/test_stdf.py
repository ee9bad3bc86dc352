"""STDF V4 export read back by an independent reader (pystdf, from PyPI): every part, result,
limit and bin must match what the store holds.

[src: STDF V4 specification, as reproduced in pystdf; REFERENCES.md s6] RESULT and the limits
are float32, so they are compared with a relative tolerance of 1e-7.
"""

from __future__ import annotations

import datetime as dt
import io
import math
import sqlite3
import warnings
from collections import Counter

import pytest
import yaml
from rich.console import Console

from sequencer.cli.main import main
from sequencer.model.judgesettings import FIGURE_INFO, FIGURE_KIND, FIGURE_UNIT
from sequencer.recipe.units import parse_quantity
from sequencer.report.data import ReportError, load_lot
from sequencer.report.stdf import stdf_bytes
from tests.report.conftest import Part, write_run

with warnings.catch_warnings():  # an old module: escape sequences in its regular expressions
    warnings.simplefilter("ignore")
    from pystdf.IO import Parser

F32 = 1e-7


def read_stdf(data: bytes) -> list[tuple[str, dict]]:
    records: list[tuple[str, dict]] = []

    class Sink:
        def after_send(self, source, item):
            kind, fields = item
            named = dict(zip(kind.fieldNames, fields, strict=True))
            records.append((type(kind).__name__.upper(), named))

    parser = Parser(inp=io.BytesIO(data))
    parser.addSink(Sink())
    parser.parse()
    return records


def stored(folder):
    """The store's own tables, read with sqlite3 (not through the report's loader)."""
    db = sqlite3.connect(folder / "results.sqlite")
    db.row_factory = sqlite3.Row
    run = dict(db.execute("SELECT * FROM run").fetchone())
    devices = [dict(r) for r in db.execute("SELECT * FROM device ORDER BY rowid")]
    return run, devices


def stored_limits(run) -> dict[str, tuple[float | None, float | None]]:
    limits = yaml.safe_load(run["recipe_text"])["judge"]["limits"]
    out = {}
    for figure, pair in limits.items():
        kind = FIGURE_KIND[figure]
        out[figure] = tuple(
            parse_quantity(pair[k], kind) if k in pair else None for k in ("min", "max")
        )
    return out


def parts(records):
    """(PRR, [PTR...]) per part, checking each part is bracketed by its PIR and PRR."""
    out, current = [], None
    for kind, fields in records:
        if kind == "PIR":
            assert current is None
            current = []
        elif kind == "PTR":
            current.append(fields)
        elif kind == "PRR":
            out.append((fields, current))
            current = None
    return out


@pytest.fixture(scope="module")
def exported(lot_folder, tmp_path_factory):
    path = tmp_path_factory.mktemp("stdf") / "lot.stdf"
    console = Console(file=io.StringIO(), width=120)
    assert main(["report", str(lot_folder), "--stdf", str(path)], console=console) == 0
    assert not (lot_folder / "report").exists()  # --stdf alone writes no HTML
    return path.read_bytes()


@pytest.mark.reference
def test_file_structure(exported, capsys):
    assert exported[:6] == bytes([0x02, 0x00, 0x00, 0x0A, 0x02, 0x04])  # REFERENCES.md s6
    records = read_stdf(exported)
    assert "Warning" not in capsys.readouterr().err  # no record of a wrong length
    kinds = [k for k, _ in records]
    assert kinds[:2] == ["FAR", "MIR"] and kinds[-1] == "MRR"
    assert kinds.count("MIR") == 1 and kinds.count("MRR") == 1 and kinds.count("PCR") == 1
    tail = kinds[kinds.index("HBR") :]
    assert set(tail) == {"HBR", "SBR", "PCR", "MRR"} and tail.index("PCR") > tail.index("SBR")


@pytest.mark.reference
def test_master_records_carry_the_run(exported, lot_folder):
    run, _ = stored(lot_folder)
    mir = dict(read_stdf(exported))["MIR"]
    assert mir["LOT_ID"] == run["lot"] and mir["PART_TYP"] == run["product"]
    assert mir["OPER_NAM"] == run["operator"] and mir["NODE_NAM"] == run["host"]
    assert mir["START_T"] == int(dt.datetime.fromisoformat(run["started"]).timestamp())
    mrr = dict(read_stdf(exported))["MRR"]
    assert mrr["FINISH_T"] == int(dt.datetime.fromisoformat(run["finished"]).timestamp())


@pytest.mark.reference
def test_every_part_result_limit_and_bin_matches_the_store(exported, lot_folder):
    run, devices = stored(lot_folder)
    limits = stored_limits(run)
    records = read_stdf(exported)
    soft_names = {f["SBIN_NUM"]: f["SBIN_NAM"] for k, f in records if k == "SBR"}
    found = parts(records)
    assert len(found) == len(devices)
    for (prr, ptrs), device in zip(found, devices, strict=True):
        assert prr["PART_ID"] == device["device"]
        assert prr["HARD_BIN"] == device["hard_bin"]
        assert soft_names[prr["SOFT_BIN"]] == device["soft_bin"]
        assert bool(prr["PART_FLG"] & 0x08) == (device["bin_class"] == "fail")
        assert bool(prr["PART_FLG"] & 0x04) == (device["verdict"] == "aborted")
        assert prr["NUM_TEST"] == len(ptrs)
        for ptr in ptrs:
            check_result(ptr, device, limits)


def check_result(ptr: dict, device: dict, limits: dict) -> None:
    figure = next(f for f, info in FIGURE_INFO.items() if info[2] == ptr["TEST_TXT"])
    unit = FIGURE_UNIT[figure]
    assert ptr["UNITS"] == unit
    value = device[f"{figure}_{unit}"]
    if value is None:
        assert ptr["TEST_FLG"] & 0x02  # RESULT not valid
    else:
        assert not ptr["TEST_FLG"] & 0x02
        assert ptr["RESULT"] == pytest.approx(value, rel=F32)
        assert bool(ptr["TEST_FLG"] & 0x04) == bool(device[f"{figure}_at_least"])
    low, high = limits.get(figure, (None, None))
    for bound, field, no_limit in ((low, "LO_LIMIT", 0x40), (high, "HI_LIMIT", 0x80)):
        if bound is None:
            assert ptr["OPT_FLAG"] & no_limit
        else:
            assert not ptr["OPT_FLAG"] & no_limit
            assert ptr[field] == pytest.approx(bound, rel=F32)
            assert ptr[field.replace("LIMIT", "SPEC")] == pytest.approx(bound, rel=F32)
    verdict_of_test(ptr, device, figure, value, low, high)


def verdict_of_test(ptr, device, figure, value, low, high) -> None:
    """A passing device passes every limited test; a value beyond a limit fails with the side
    flagged; a guard-band figure has no pass/fail indication (TEST_FLG bit 6)."""
    if (low, high) == (None, None) or value is None:
        return
    outside_low = low is not None and value < low
    outside_high = high is not None and value > high
    assert bool(ptr["PARM_FLG"] & 0x10) == outside_low
    assert bool(ptr["PARM_FLG"] & 0x08) == outside_high
    if outside_low or outside_high:
        assert ptr["TEST_FLG"] & 0x80
    if device["verdict"] == "pass":
        assert not ptr["TEST_FLG"] & 0xC0
    reasons = (device["reasons"] or "").split("; ")
    name = FIGURE_INFO[figure][2]
    guarded = any(r.startswith(name) and "in the guard band" in r for r in reasons)
    assert bool(ptr["TEST_FLG"] & 0x40) == guarded


@pytest.mark.reference
def test_bin_summaries_count_the_store(exported, lot_folder):
    _, devices = stored(lot_folder)
    records = read_stdf(exported)
    hard = {f["HBIN_NUM"]: f["HBIN_CNT"] for k, f in records if k == "HBR"}
    soft = {f["SBIN_NAM"]: f["SBIN_CNT"] for k, f in records if k == "SBR"}
    want_hard = Counter(d["hard_bin"] for d in devices)
    want_soft = Counter(d["soft_bin"] for d in devices)
    assert {k: v for k, v in hard.items() if v} == dict(want_hard)
    assert {k: v for k, v in soft.items() if v} == dict(want_soft)
    pf = {f["HBIN_NUM"]: f["HBIN_PF"] for k, f in records if k == "HBR"}
    assert all(pf[d["hard_bin"]] == ("P" if d["bin_class"] == "pass" else "F") for d in devices)
    pcr = dict(records)["PCR"]
    assert pcr["PART_CNT"] == len(devices) and pcr["RTST_CNT"] == 0
    assert pcr["GOOD_CNT"] == sum(d["bin_class"] == "pass" for d in devices)
    assert pcr["ABRT_CNT"] == sum(d["verdict"] == "aborted" for d in devices)


@pytest.mark.reference
def test_a_retest_supersedes_the_earlier_part(lot_folder, retest_folder):
    records = read_stdf(stdf_bytes(load_lot([lot_folder, retest_folder])))
    prrs = [f for k, f in records if k == "PRR"]
    again = [f["PART_ID"] for f in prrs if f["PART_FLG"] & 0x01]
    assert again == ["FK2611-07-004", "FK2611-07-008"]
    assert dict(records)["PCR"]["RTST_CNT"] == 2
    hard = {f["HBIN_NUM"]: f["HBIN_CNT"] for k, f in records if k == "HBR"}
    assert sum(hard.values()) == len(prrs) - 2  # each device once, with its last result


@pytest.mark.robustness
def test_one_lot_per_file(lot_folder, tmp_path):
    other = write_run(tmp_path / "other", "FK2611-08", [Part("FK2611-08-001")], "2026-11-05T10:00")
    with pytest.raises(ReportError, match="one lot"):
        stdf_bytes(load_lot([lot_folder, other]))


def test_missing_values_are_flagged_not_invented(exported):
    for _, ptrs in parts(read_stdf(exported)):
        for ptr in ptrs:
            if ptr["TEST_FLG"] & 0x02:
                assert ptr["RESULT"] == 0.0 and not math.isnan(ptr["RESULT"])
