"""A run folder looked at from outside, read only: what `ccbench status` shows.

Nothing here takes the folder's lock, opens the database or writes a byte: a run in progress
must never be refused, slowed or changed by someone looking at it. What it reads:
- manifest.json: the run, its sessions, how each ended, and the plan's estimate (`planned`);
- journal.jsonl: one line per device, fsynced before anything else is written, so it is the
  freshest count (a torn last line, a write in progress, is left out);
- run.lock and the kernel's lock table (/proc/locks on Linux): whether the lock is held now,
  and by which process. Where the table cannot be read, the pid in run.lock is asked whether
  it still lives (on this host only).
"""

from __future__ import annotations

import json
import os
import platform
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sequencer.model.errors import StoreReadError
from sequencer.store.runfolder import LOCK_FILE, MANIFEST_FILE, holds_run, read_manifest

JOURNAL_FILE = "journal.jsonl"
HOLDER = re.compile(r"^pid (\d+) on (\S+) since (\S+)")


@dataclass(frozen=True)
class Holder:
    """Who holds (or last held) run.lock. `alive`: True held now, False not held, None cannot
    be told from here (another host)."""

    pid: int | None
    host: str
    since: str
    alive: bool | None


@dataclass(frozen=True)
class Tally:
    """The devices the journal holds: counts by verdict, the latest round (the repetition
    number; `pass` in journals of before schema 8), the channels done in it, and when devices
    of the current session were measured."""

    stored: int = 0
    verdicts: dict[str, int] = field(default_factory=dict)
    last_round: int = 1
    done_in_last_round: int = 0
    session_devices: int = 0
    session_first: str | None = None
    session_last: str | None = None


@dataclass(frozen=True)
class RunStatus:
    folder: Path
    manifest: dict[str, Any]
    tally: Tally
    holder: Holder

    @property
    def sessions(self) -> list[dict[str, Any]]:
        found = self.manifest.get("sessions")
        return found if isinstance(found, list) else []

    @property
    def last_session(self) -> dict[str, Any]:
        return self.sessions[-1] if self.sessions else {}

    @property
    def running(self) -> bool:
        return bool(self.holder.alive)


def look(folder: Path) -> RunStatus:
    """The folder's run as it stands (StoreReadError, exit 2, for a folder that holds none)."""
    if not folder.is_dir():
        raise StoreReadError(f"{folder}: no such run folder")
    if not (folder / MANIFEST_FILE).exists():
        what = "holds a run written before run manifests" if holds_run(folder) else "holds no run"
        raise StoreReadError(f"{folder}: {what}; `ccbench status` needs its {MANIFEST_FILE}")
    manifest = read_manifest(folder)
    sessions = manifest.get("sessions") or [{}]
    session = int(sessions[-1].get("session") or 1)
    return RunStatus(folder, manifest, tally(folder / JOURNAL_FILE, session), holder(folder))


def tally(path: Path, session: int) -> Tally:
    verdicts: Counter[str] = Counter()
    channels_by_round: dict[int, set[object]] = {}
    stored = in_session = 0
    first = last = None
    for entry in _entries(path):
        stored += 1
        verdicts[str(entry.get("verdict"))] += 1
        number = int(entry.get("round", entry.get("pass")) or 1)
        channels_by_round.setdefault(number, set()).add(entry.get("channel", entry.get("device")))
        if int(entry.get("session") or 1) == session:
            in_session += 1
            first = first or entry.get("measured")
            last = entry.get("measured") or last
    last_round = max(channels_by_round, default=1)
    done = len(channels_by_round.get(last_round, ()))
    return Tally(stored, dict(verdicts), last_round, done, in_session, first, last)


def _entries(path: Path):
    """Each whole journal line as a dict; a line not yet finished (no newline) is skipped."""
    try:
        file = open(path, "rb")  # noqa: SIM115 - closed below
    except FileNotFoundError:
        return
    with file:
        for raw in file:
            if not raw.endswith(b"\n"):
                return  # a write in progress, or a crash's torn line
            try:
                entry = json.loads(raw)
            except ValueError:
                continue  # damage is `ccbench run --resume`'s to report, not a status's
            if isinstance(entry, dict):
                yield entry


def holder(folder: Path) -> Holder:
    path = folder / LOCK_FILE
    try:
        text = path.read_text(encoding="utf-8", errors="replace").strip()
        st = os.stat(path)
    except OSError:
        return Holder(None, "", "", False)
    found = HOLDER.match(text)
    pid, host, since = (int(found[1]), found[2], found[3]) if found else (None, "", "")
    locked = _kernel_lock(st)
    if locked is not None:
        return Holder(locked if locked > 0 else pid, host, since, locked > 0)
    if host and host != platform.node():
        return Holder(pid, host, since, None)
    return Holder(pid, host, since, pid is not None and _lives(pid))


def _kernel_lock(st: os.stat_result) -> int | None:
    """The pid holding a flock on the file (its inode) per /proc/locks, 0 when none does,
    None when the table cannot be read (not Linux)."""
    try:
        table = Path("/proc/locks").read_text(encoding="ascii", errors="replace")
    except OSError:
        return None
    want = f"{os.major(st.st_dev):02x}:{os.minor(st.st_dev):02x}:{st.st_ino}"
    for line in table.splitlines():
        parts = line.split()
        if "->" in parts:  # a waiter, not a holder
            continue
        if len(parts) >= 6 and parts[1] == "FLOCK" and parts[5] == want:
            return int(parts[4]) if parts[4].isdigit() else 1
    return 0


def _lives(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # someone else's process: it lives
    return True
