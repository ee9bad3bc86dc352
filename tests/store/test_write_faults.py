"""Writes that fail in a real `ccbench run` (in process, the simulator over TCP): a full disk,
a read-only folder. Each gives one clear line and a non-zero exit, the output is off, nothing
stored before is lost, and --resume completes the run with every device once."""

from __future__ import annotations

import contextlib
import csv
import errno
import io
import json
import os
import sqlite3
import subprocess
from pathlib import Path

import pytest
from rich.console import Console

from instruments.scpi import message_units
from sequencer.cli.main import main
from sequencer.store import database
from tests.store.conftest import write_recipe

pytestmark = [pytest.mark.sim, pytest.mark.robustness]


def ccbench(*argv: str) -> tuple[int, str]:
    out = io.StringIO()
    code = main(list(argv), console=Console(file=out, width=300, highlight=False))
    return code, out.getvalue()


def stored(folder: Path) -> tuple[list[str], list[str], list[str]]:
    """Device names in journal, database and CSV."""
    journal = [json.loads(x)["device"] for x in (folder / "journal.jsonl").read_text().splitlines()]
    db = sqlite3.connect(folder / "results.sqlite")
    in_db = [d for (d,) in db.execute("SELECT device FROM device ORDER BY seq")]
    db.close()
    with open(folder / "devices.csv", newline="") as f:
        in_csv = [r["device"] for r in csv.DictReader(f)]
    return journal, in_db, in_csv


def output_left_off(folder: Path) -> bool:
    """The last output command sent was OUTP OFF, and it came after the last reading."""
    fields = [line.split("\t") for line in (folder / "scpi.log").read_text().splitlines()]
    sent = [unit for f in fields if f[2] == ">>" for unit in message_units(f[3])]
    last_off = max(i for i, m in enumerate(sent) if m == "OUTP OFF")
    last_read = max(i for i, m in enumerate(sent) if m.startswith("READ?"))
    return last_off > last_read and "OUTP ON" not in sent[last_off:]


@pytest.fixture
def recipe(tmp_path) -> Path:
    return write_recipe(tmp_path / "recipes", channels=5)


def _full_on_journal_fsync(monkeypatch, at: int) -> None:
    real, seen = os.fsync, []

    def fsync(fd: int) -> None:
        if os.readlink(f"/proc/self/fd/{fd}").endswith("journal.jsonl"):
            seen.append(fd)
            if len(seen) == at:
                raise OSError(errno.ENOSPC, "No space left on device")
        real(fd)

    monkeypatch.setattr(os, "fsync", fsync)


def test_a_full_disk_at_the_journal_stops_the_run_with_one_line(tmp_path, recipe, monkeypatch):
    out = tmp_path / "run"
    _full_on_journal_fsync(monkeypatch, at=3)
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out))
    monkeypatch.undo()
    assert code == 5, text
    lines = [ln for ln in text.splitlines() if ln.startswith("ccbench:")]
    assert lines == [
        f"ccbench: {out}: result of FK2611-07-003 could not be written (No space left on "
        "device); everything before it is kept; output off (read back from the instrument)"
    ]
    assert stored(out) == (["FK2611-07-001", "FK2611-07-002"],) * 3
    assert output_left_off(out)

    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume")
    assert code == 0, text
    journal, in_db, in_csv = stored(out)
    assert in_csv == in_db == journal == [f"FK2611-07-{c:03d}" for c in range(1, 6)]


def test_a_full_disk_at_the_database_is_caught_up_on_resume(tmp_path, recipe, monkeypatch):
    out = tmp_path / "run"
    real, calls = database.write_device, []

    def full(db, run_id, entry):
        calls.append(entry["device"])
        if len(calls) == 2:
            raise sqlite3.OperationalError("database or disk is full")
        return real(db, run_id, entry)

    monkeypatch.setattr(database, "write_device", full)
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out))
    monkeypatch.undo()
    assert code == 5, text
    assert "result of FK2611-07-002 is in the journal but not in results.sqlite/devices.csv " \
           "(database or disk is full); --resume brings them up to date" in text  # fmt: skip
    assert output_left_off(out)
    journal, in_db, in_csv = stored(out)
    assert journal == ["FK2611-07-001", "FK2611-07-002"] and in_db == in_csv == journal[:1]

    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume")
    assert code == 0, text
    assert "caught up with the journal" in text
    assert "resume: session 2; 2 devices stored; round 1 has 2 devices done" in text
    journal, in_db, in_csv = stored(out)
    assert in_csv == in_db == journal == [f"FK2611-07-{c:03d}" for c in range(1, 6)]


def test_a_read_only_folder_is_refused_before_the_instrument_is_touched(
    tmp_path, recipe, monkeypatch
):
    import builtins

    out = tmp_path / "run"
    out.mkdir()
    real_open = builtins.open

    def read_only(path, mode="r", *args, **kwargs):
        if str(path).startswith(str(out)) and any(m in mode for m in "wax+"):
            raise OSError(errno.EROFS, "Read-only file system", str(path))
        return real_open(path, mode, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", read_only)
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out))
    monkeypatch.undo()
    assert code == 5
    line = f"ccbench: {out}: cannot be written (Read-only file system); nothing was measured"
    assert line in text
    assert "instrument:" not in text and list(out.iterdir()) == []


@contextlib.contextmanager
def tiny_filesystem(where: Path, size: str):
    """A tmpfs of `size` at `where`, when this process may mount one (root); else skip."""
    where.mkdir()
    if os.geteuid() != 0:
        pytest.skip("mounting a tiny filesystem needs root; the injected errors cover the rest")
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(where)],
                          capture_output=True, text=True)  # fmt: skip
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({done.stderr.strip()})")
    try:
        yield lambda options: subprocess.run(
            ["mount", "-o", f"remount,{options}", str(where)], check=True
        )
    finally:
        subprocess.run(["umount", "-l", str(where)], check=False)


def test_a_really_full_and_then_read_only_filesystem(tmp_path, recipe):
    # sized so that the schema fits and the disk fills within the first few devices
    with tiny_filesystem(tmp_path / "tiny", "224k") as remount:
        out = tmp_path / "tiny" / "run"
        code, text = ccbench("run", str(recipe), "--sim", "--out", str(out))
        assert code == 5, text
        (line,) = [ln for ln in text.splitlines() if ln.startswith("ccbench:")]
        assert "No space left on device" in line or "disk is full" in line
        journal, in_db, in_csv = stored(out)
        assert 0 < len(journal) < 5 and in_db == in_csv == journal[: len(in_db)]

        remount("ro")
        code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume")
        assert code == 5 and "Read-only file system" in text and "instrument:" not in text
        assert stored(out)[0] == journal

        remount("rw,size=4m")
        code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume")
        assert code == 0, text
        journal, in_db, in_csv = stored(out)
        assert in_csv == in_db == journal == [f"FK2611-07-{c:03d}" for c in range(1, 6)]


def test_a_torn_journal_line_is_named_on_resume_and_its_device_measured_again(tmp_path, recipe):
    out = tmp_path / "run"
    assert ccbench("run", str(recipe), "--sim", "--out", str(out))[0] == 0
    journal = out / "journal.jsonl"
    lines = journal.read_bytes().splitlines(keepends=True)
    journal.write_bytes(b"".join(lines[:-1]) + lines[-1][:120])  # the crash cut the last line
    db = sqlite3.connect(out / "results.sqlite")  # ... before the database had it
    db.execute("DELETE FROM point WHERE device = 'FK2611-07-005'")
    db.execute("DELETE FROM device WHERE device = 'FK2611-07-005'")
    db.commit()
    db.close()
    code, text = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume")
    assert code == 0, text
    assert (
        "resume: journal.jsonl: dropped a torn last line (120 bytes) left by the crash; the 4 "
        "entries before it are kept" in text
    )
    measured = text.split("instrument:")[1]
    assert "FK2611-07-005" in measured and "FK2611-07-004" not in measured  # it alone, again
    journal, in_db, in_csv = stored(out)
    assert in_csv == in_db == journal == [f"FK2611-07-{c:03d}" for c in range(1, 6)]
