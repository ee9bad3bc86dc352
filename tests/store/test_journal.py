"""The journal: fsynced lines, a torn last line dropped with a warning, nothing before it lost."""

from __future__ import annotations

import errno
import json
import logging
import math
import os

import pytest

from sequencer.model.errors import StoreError
from sequencer.store.journal import Journal, decode_floats, encode_floats, read_entries, recover


def _three(path):
    journal = Journal(path)
    for k in range(3):
        points = {"current_A": encode_floats([1e-3 * k, math.inf])}
        journal.append({"device": f"d{k}", "points": points})
    journal.close()


def test_entries_are_numbered_and_read_back_in_order(tmp_path):
    path = tmp_path / "journal.jsonl"
    _three(path)
    entries = list(read_entries(path))
    assert [(e["seq"], e["device"]) for e in entries] == [(1, "d0"), (2, "d1"), (3, "d2")]
    assert decode_floats(entries[2]["points"]["current_A"]) == [2e-3, math.inf]


def test_non_finite_values_survive_the_round_trip():
    values = [1.5, math.inf, -math.inf, math.nan, 0.0]
    back = decode_floats(json.loads(json.dumps(encode_floats(values), allow_nan=False)))
    assert back[:3] == values[:3] and math.isnan(back[3]) and back[4] == 0.0
    assert math.isnan(decode_floats([None])[0])  # an older journal's null reads as NaN


def test_every_append_is_fsynced_before_it_returns(tmp_path, monkeypatch):
    synced = []
    real = os.fsync
    monkeypatch.setattr(os, "fsync", lambda fd: (synced.append(fd), real(fd)))
    journal = Journal(tmp_path / "journal.jsonl")
    journal.append({"device": "a"})
    journal.append({"device": "b"})
    journal.close()
    assert len(synced) == 2


@pytest.mark.robustness
@pytest.mark.parametrize("cut", [1, 17, -2, -1])
def test_a_torn_last_line_is_dropped_with_a_warning_and_the_rest_kept(tmp_path, caplog, cut):
    path = tmp_path / "journal.jsonl"
    _three(path)
    data = path.read_bytes()
    last_start = data.rstrip(b"\n").rfind(b"\n") + 1
    torn = data[: last_start + cut] if cut > 0 else data[:cut]
    path.write_bytes(torn)
    with caplog.at_level(logging.WARNING, logger="sequencer.store.journal"):
        found = recover(path)
    assert (found.entries, found.last_seq) == (2, 2)
    assert found.dropped == torn[last_start:]
    assert "torn last line" in caplog.text
    assert path.read_bytes() == data[:last_start]  # cut back to the last whole line
    journal = Journal(path, last_seq=found.last_seq)
    journal.append({"device": "again"})
    journal.close()
    assert [e["seq"] for e in read_entries(path)] == [1, 2, 3]


@pytest.mark.robustness
def test_a_damaged_line_before_the_end_is_refused_not_dropped(tmp_path):
    path = tmp_path / "journal.jsonl"
    _three(path)
    lines = path.read_bytes().split(b"\n")
    lines[1] = lines[1][:10]
    path.write_bytes(b"\n".join(lines))
    with pytest.raises(StoreError, match=r"journal.jsonl:2: damaged line before the end"):
        recover(path)


@pytest.mark.robustness
def test_a_failed_write_leaves_no_partial_line(tmp_path, monkeypatch):
    path = tmp_path / "journal.jsonl"
    journal = Journal(path)
    journal.append({"device": "kept"})
    before = path.read_bytes()

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(OSError, match="No space left"):
        journal.append({"device": "lost"})
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert journal.last_seq == 1
    journal.close()
    assert recover(path).dropped == b""


def test_recovering_a_missing_journal_finds_nothing(tmp_path):
    found = recover(tmp_path / "none.jsonl")
    assert (found.entries, found.last_seq, found.dropped) == (0, 0, b"")
