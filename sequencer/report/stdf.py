"""STDF V4 export of a lot: FAR, MIR, per part PIR / PTR... / PRR, then HBR, SBR, PCR, MRR.

Record layouts follow the STDF V4 specification [src: STDF V4 specification, as reproduced in
the PyPI package pystdf; REFERENCES.md s6]. Little-endian (CPU_TYP 2), so the file starts with
the bytes 02 00 00 0a 02 04. Written with struct only; the tests read it back with pystdf.

How our results map onto the records:

- one PIR/PRR pair per stored device row, head 1 site 1 (the tray is tested one device at a
  time); PART_ID is the device name, PART_TXT its tray channel. A device stored again (a
  retest) sets PART_FLG bit 0, so its records supersede the earlier ones;
- one PTR per reported figure, TEST_NUM from `TEST_NUMBERS` (fixed, so a test keeps its number
  across recipes), UNITS the SI unit (A, V, ohm, W), scaling exponents 0;
- LO_LIMIT/HI_LIMIT and LO_SPEC/HI_SPEC both hold the recipe's limits. The guarded rule's
  acceptance bounds differ from device to device (U = k u), so they are not limits here: a
  result inside the limits but within U of one sets TEST_FLG bit 6 ("no pass/fail
  indication"), which is what a guard-band verdict says;
- an "at least" figure (a lower bound) sets TEST_FLG bit 2 (result unreliable); a missing one
  bit 1 (result invalid), and bit 7 where the recipe needs it; an aborted device bit 5;
- PRR: HARD_BIN the hard bin, SOFT_BIN the soft bin's number (`softbins`), PART_FLG bit 3 when
  the hard bin is of class fail, bit 2 when the device was aborted;
- HBR/SBR (head 255: all sites) count each device once, with its last result; PCR counts every
  part record (PART_CNT), the retests among them (RTST_CNT), aborted and good parts.
"""

from __future__ import annotations

import datetime as dt
import math
import struct
from pathlib import Path

import numpy as np
import pandas as pd

from sequencer.judge import decide
from sequencer.model.errors import StoreError
from sequencer.model.judgesettings import FIGURE_INFO, FIGURE_UNIT
from sequencer.report.data import Lot, ReportError, bound_column, u_column, value_column
from sequencer.report.lotsummary import reported_figures, soft_numbers
from sequencer.store.atomic import replace_file

# Test numbers of the figures: fixed, never reuse one for another figure.
TEST_NUMBERS = {
    "regulated_current": 100,
    "limiting_voltage": 110,
    "dynamic_impedance": 120,
    "knee_impedance": 130,
    "reverse_current": 140,
    "peak_current": 150,
    "peak_dissipation": 160,
}
MISSING_U4 = 0xFFFFFFFF
NO_COORD = -32768


# --- field encoders ------------------------------------------------------------------------


def cn(text: object) -> bytes:
    """C*n: a length byte and at most 255 ASCII characters (others replaced by '?')."""
    raw = str(text or "").encode("ascii", "replace")[:255]
    return struct.pack("<B", len(raw)) + raw


def c1(char: str) -> bytes:
    return (char or " ")[:1].encode("ascii", "replace")


def record(typ: int, sub: int, body: bytes) -> bytes:
    if len(body) > 0xFFFF:
        raise ValueError("an STDF record holds at most 65535 bytes")
    return struct.pack("<HBB", len(body), typ, sub) + body


def far() -> bytes:
    return record(0, 10, struct.pack("<BB", 2, 4))


def epoch(stamp: object) -> int:
    """ISO time (as the run table stores it) -> seconds since 1970 UTC; 0 when unknown."""
    try:
        when = dt.datetime.fromisoformat(str(stamp))
    except ValueError:
        return 0
    if when.tzinfo is None:
        when = when.replace(tzinfo=dt.UTC)
    return max(0, int(when.timestamp()))


# --- records -------------------------------------------------------------------------------


MIR_TEXT = (
    "LOT_ID", "PART_TYP", "NODE_NAM", "TSTR_TYP", "JOB_NAM", "JOB_REV", "SBLOT_ID", "OPER_NAM",
    "EXEC_TYP", "EXEC_VER", "TEST_COD", "TST_TEMP", "USER_TXT", "AUX_FILE", "PKG_TYP",
    "FAMLY_ID", "DATE_COD", "FACIL_ID", "FLOOR_ID", "PROC_ID", "OPER_FRQ", "SPEC_NAM",
    "SPEC_VER", "FLOW_ID", "SETUP_ID", "DSGN_REV", "ENG_ID", "ROM_COD", "SERL_NUM", "SUPR_NAM",
)  # fmt: skip


def mir_texts(run: dict, lot: str) -> dict[str, str]:
    """The MIR's text fields we fill; the others stay empty."""
    sim = bool(run.get("simulator"))
    return {
        "LOT_ID": lot,
        "PART_TYP": run.get("product") or "",
        "NODE_NAM": run.get("host") or "",
        "TSTR_TYP": run.get("identity") or "",
        "JOB_NAM": Path(str(run.get("recipe_file") or "")).name,
        "JOB_REV": str(run.get("recipe_sha256") or "")[:16],
        "OPER_NAM": run.get("operator") or "",
        "EXEC_TYP": "ccbench",
        "EXEC_VER": run.get("software_version") or "",
        "USER_TXT": "measured on the simulated SMU" if sim else "",
        "SETUP_ID": run.get("station") or "",
    }


def mir(run: dict, lot: str) -> bytes:
    start = epoch(run.get("started"))
    mode = "D" if run.get("simulator") else "P"  # development on the simulator, else production
    head = struct.pack("<IIB", start, start, 1) + c1(mode) + c1(" ") + c1(" ")
    head += struct.pack("<H", 65535) + c1(" ")
    texts = mir_texts(run, lot)
    return record(1, 10, head + b"".join(cn(texts.get(name, "")) for name in MIR_TEXT))


def pir() -> bytes:
    return record(5, 10, struct.pack("<BB", 1, 1))


def ptr(number: int, result: float, test_flg: int, parm_flg: int, figure: str, limit) -> bytes:
    opt = 0x02  # bit 1 is reserved and must be 1
    opt |= 0x44 if limit.min is None else 0  # no low limit (test and spec)
    opt |= 0x88 if limit.max is None else 0
    value = 0.0 if math.isnan(result) else result
    body = struct.pack("<IBBBBf", number, 1, 1, test_flg, parm_flg, value)
    body += cn(FIGURE_INFO[figure][2]) + cn("") + struct.pack("<Bbbb", opt, 0, 0, 0)
    body += struct.pack("<ff", limit.min or 0.0, limit.max or 0.0)
    body += cn(FIGURE_UNIT[figure]) + cn("") + cn("") + cn("")
    body += struct.pack("<ff", limit.min or 0.0, limit.max or 0.0)
    return record(15, 10, body)


def prr(part_flg: int, tests: int, hard: int, soft: int, millis: int, part: str, text: str):
    body = struct.pack("<BBBHHHhhI", 1, 1, part_flg, tests, hard, soft, NO_COORD, NO_COORD, millis)
    return record(5, 20, body + cn(part) + cn(text) + struct.pack("<B", 0))


def bin_record(sub: int, number: int, count: int, klass: str, name: str) -> bytes:
    """HBR (sub 40) or SBR (sub 50) for all sites (head 255)."""
    flag = {"pass": "P", "fail": "F"}.get(klass, " ")
    return record(1, sub, struct.pack("<BBHI", 255, 1, number, count) + c1(flag) + cn(name))


def pcr(parts: int, retests: int, aborted: int, good: int) -> bytes:
    return record(1, 30, struct.pack("<BBIIIII", 255, 1, parts, retests, aborted, good, MISSING_U4))


def mrr(finished: object) -> bytes:
    return record(1, 20, struct.pack("<I", epoch(finished)) + c1(" ") + cn("") + cn(""))


# --- flags ---------------------------------------------------------------------------------


def test_flags(status: int, known: bool, at_least: bool, limited: bool, needed: bool) -> int:
    """TEST_FLG of one figure from its limit status (decide.WITHIN ... UNPROVEN)."""
    flags = 0
    if not known:
        flags |= 0x02  # RESULT not valid
        return flags | (0x80 if needed or limited else 0x40)
    if at_least:
        flags |= 0x04  # a lower bound: the number itself is not the result
    if not limited or status in decide.GUARDED:
        return flags | 0x40  # no pass/fail indication
    return flags | (0x80 if status in decide.FAILING else 0)


def parm_flags(status: int) -> int:
    """PARM_FLG: a result equal to a limit passes (bits 6, 7); above / below the limit."""
    flags = 0xC0
    if status == decide.ABOVE:
        flags |= 0x08
    if status == decide.BELOW:
        flags |= 0x10
    return flags


# --- the file ------------------------------------------------------------------------------


def stdf_bytes(lot: Lot) -> bytes:
    lots = {str(x) for x in lot.runs["lot"]}
    if len(lots) > 1:
        raise ReportError(f"an STDF file holds one lot; these runs hold {', '.join(sorted(lots))}")
    figures = reported_figures(lot)
    numbers = soft_numbers(lot)
    runs = lot.runs.to_dict("records")
    out = [far(), mir(runs[0], lot.name)]
    for row in lot.devices.to_dict("records"):
        out += _part(lot, row, figures, numbers)
    out += _summary(lot, numbers)
    ends = [r.get("finished") or r.get("started") for r in runs]
    out.append(mrr(max((str(e) for e in ends if e), default="")))
    return b"".join(out)


def _part(lot: Lot, row: dict, figures: list[str], numbers: dict) -> list[bytes]:
    records = [pir()]
    aborted = row["verdict"] == "aborted"
    needed = set(lot.settings.required())
    for figure in figures:
        value = float(row[value_column(figure)])
        at_least = bool(row[bound_column(figure)])
        limit = lot.limit(figure)
        k = row.get(f"{figure}_k")
        k = lot.settings.coverage_factor or 2.0 if k is None or pd.isna(k) else float(k)
        status = _status(lot, figure, value, at_least, k * float(row[u_column(figure)]))
        limited = limit.min is not None or limit.max is not None
        flags = test_flags(status, not math.isnan(value), at_least, limited, figure in needed)
        flags |= 0x20 if aborted else 0
        parm = parm_flags(status) if limited else 0
        records.append(ptr(TEST_NUMBERS[figure], value, flags, parm, figure, limit))
    part_flg = 0x01 if row["retest"] else 0
    part_flg |= 0x04 if aborted else 0
    part_flg |= 0x08 if row["bin_class"] != "pass" else 0
    channel = row.get("channel")
    text = f"channel {int(channel)}" if channel is not None and not pd.isna(channel) else ""
    millis = _millis(lot, row["row"])
    soft = numbers[str(row["soft_bin"])]
    hard = int(row["hard_bin"])
    records.append(prr(part_flg, len(figures), hard, soft, millis, str(row["device"]), text))
    return records


def _status(lot: Lot, figure: str, value: float, at_least: bool, big_u: float) -> int:
    """Where a stored figure stands; big_u is k u as the judge used it (NaN: unknown)."""
    if lot.settings.decision == "guarded":
        big_u = math.inf if math.isnan(big_u) else big_u
    else:
        big_u = 0.0
    one = decide.limit_status(
        np.array([value]), np.array([at_least]), np.array([big_u]), lot.limit(figure)
    )
    return int(one[0])


def _millis(lot: Lot, row: int) -> int:
    last = lot.last_reading_s(row)
    return round(1000 * last) if math.isfinite(last) else 0


def _summary(lot: Lot, numbers: dict) -> list[bytes]:
    final = lot.final
    out = []
    hard = final.groupby("hard_bin")["bin_class"].agg(["first", "size"])
    known = {rule.number: rule.klass for rule in lot.settings.bins}
    for number in sorted(set(known) | set(hard.index)):
        count = int(hard["size"].get(number, 0))
        klass = known.get(number) or str(hard["first"].get(number, ""))
        names = final.loc[final["hard_bin"] == number, "soft_bin"].unique()
        out.append(bin_record(40, int(number), count, klass, ", ".join(names)))
    soft = final.groupby("soft_bin")["bin_class"].agg(["first", "size"])
    named = {rule.name: rule.klass for rule in lot.settings.bins if rule.name}
    for name in sorted(set(named) | set(soft.index), key=lambda x: numbers[x]):
        count = int(soft["size"].get(name, 0))
        klass = str(soft["first"].get(name, named.get(name, "")))
        out.append(bin_record(50, numbers[name], count, klass, name))
    devices = lot.devices
    good = int((final["bin_class"] == "pass").sum())
    aborted = int((devices["verdict"] == "aborted").sum())
    out.append(pcr(len(devices), int(devices["retest"].sum()), aborted, good))
    return out


def write_stdf(lot: Lot, path: Path) -> int:
    """Write the lot to `path`; returns the number of part records."""
    data = stdf_bytes(lot)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        replace_file(path, data)  # whole or not at all: an STDF file cut short misleads readers
    except OSError as exc:
        raise StoreError(f"{path}: cannot be written ({exc.strerror})") from None
    return len(lot.devices)
