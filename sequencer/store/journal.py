"""The journal: one JSON line per device, flushed and fsynced before the result goes anywhere else.

It is the run's record of truth: the SQLite file and the CSV are rebuilt from it when they lag
behind. A crash can only leave its last line torn (a write cut short never has its newline), so
reading it back drops a torn last line with a warning and keeps everything before it. Any other
damaged line is not a crash's doing and is refused.

JSON has no infinity or NaN; a non-finite point is journalled as the text "inf", "-inf" or "nan"
and read back as the float it was.
"""

from __future__ import annotations

import json
import logging
import math
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sequencer.model.errors import StoreError
from sequencer.store.oldnames import current

log = logging.getLogger(__name__)

NON_FINITE = {"inf": math.inf, "-inf": -math.inf, "nan": math.nan}


def encode_floats(values: list[float]) -> list[float | str]:
    """Floats as JSON can carry them: non-finite ones as text."""
    return [v if math.isfinite(v) else _name(v) for v in values]


def decode_floats(values: list[float | str | None]) -> list[float]:
    """The inverse of `encode_floats`; null (an older journal's over-range) reads as NaN."""
    return [math.nan if v is None else NON_FINITE[v] if isinstance(v, str) else v for v in values]


def _name(value: float) -> str:
    return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")


@dataclass(frozen=True)
class Recovered:
    """What reading a journal back found: the good entries' count and the last sequence number,
    the byte length of the good part, and the torn tail that was dropped (b'' when none)."""

    entries: int
    last_seq: int
    good_bytes: int
    dropped: bytes


class Journal:
    """Append-only JSON Lines file; every `append` is on the disk when it returns."""

    def __init__(self, path: Path, last_seq: int = 0) -> None:
        self.path = path
        self.last_seq = last_seq
        # Unbuffered: a buffered file flushes before it truncates, so after a failed write (a
        # full disk) cutting the torn line back would fail again on the same flush.
        self._file = open(path, "ab", buffering=0)  # noqa: SIM115 - open as long as the run
        self._size = self._file.tell()

    def append(self, entry: dict[str, Any]) -> int:
        """Give the entry the next sequence number, write it as one line and fsync it.

        On a failed write the file is cut back to where it was (if it can be), so that a full
        disk leaves no torn line behind; the error propagates as OSError."""
        seq = self.last_seq + 1
        line = json.dumps({"seq": seq, **entry}, allow_nan=False, separators=(",", ":"))
        data = (line + "\n").encode()
        try:
            left = memoryview(data)
            while left:  # a raw write may take only part of the line
                left = left[self._file.write(left) or 0 :]
            os.fsync(self._file.fileno())
        except OSError:
            self._cut_back()
            raise
        self._size += len(data)
        self.last_seq = seq
        return seq

    def _cut_back(self) -> None:
        try:
            self._file.truncate(self._size)
            self._file.seek(self._size)
        except (OSError, ValueError):
            log.warning("%s: could not remove a partly written line", self.path)

    def close(self) -> None:
        self._file.close()


def read_entries(path: Path) -> Iterator[dict[str, Any]]:
    """Every complete entry in order, one at a time (a long run's journal never sits in memory).
    A torn last line is skipped; use `recover` first to warn about it and cut it off."""
    with open(path, "rb") as f:
        for number, raw in enumerate(f, start=1):
            if not raw.endswith(b"\n"):
                return  # the torn last line
            yield current(_parse(path, number, raw))


def recover(path: Path, *, cut: bool = True) -> Recovered:
    """Check the journal, cut off a torn last line (with a warning; `cut=False` only looks) and
    report what is kept. Sequence numbers run 1, 2, 3...: a repeated or missing one is a hand's
    doing, refused at its line."""
    if not path.exists():
        return Recovered(0, 0, 0, b"")
    entries, last_seq, good = 0, 0, 0
    with open(path, "rb") as f:
        raw, number = f.readline(), 1
        while raw.endswith(b"\n"):
            following = f.readline()
            entry = _parse(path, number, raw, last_line=not following)
            if entry is None:
                break
            _check_order(path, number, int(entry["seq"]), last_seq)
            entries, last_seq, good = entries + 1, int(entry["seq"]), good + len(raw)
            raw, number = following, number + 1
        f.seek(good)
        dropped = f.read()
    if dropped and cut:
        log.warning("%s: dropped a torn last line (%d bytes)", path, len(dropped))
        with open(path, "r+b") as f:
            f.truncate(good)
            os.fsync(f.fileno())
    return Recovered(entries, last_seq, good, dropped)


def _check_order(path: Path, number: int, seq: int, last_seq: int) -> None:
    if seq != last_seq + 1:
        what = "repeats entry" if seq <= last_seq else "skips to entry"
        raise StoreError(
            f"{path}:{number}: {what} {seq} after entry {last_seq} (a crash only tears the last "
            "line: the file was changed by hand); keep the folder as it is and look at that line"
        )


def append_rebuilt(path: Path, entries: list[dict[str, Any]]) -> None:
    """Write entries back that the journal lost and the database holds, each as one line."""
    with open(path, "ab") as f:
        for entry in entries:
            line = json.dumps(entry, allow_nan=False, separators=(",", ":"))
            f.write((line + "\n").encode())
        f.flush()
        os.fsync(f.fileno())


def _parse(path: Path, number: int, raw: bytes, *, last_line: bool = False) -> Any:
    try:
        entry = json.loads(raw)
        if not isinstance(entry, dict) or not isinstance(entry.get("seq"), int):
            raise ValueError("not a journal entry")
        return entry
    except ValueError:
        if last_line:
            return None  # complete but unreadable last line: treated like a torn one
        raise StoreError(
            f"{path}:{number}: damaged line before the end (not a crash's doing); "
            "keep the folder as it is and look at that line"
        ) from None
