"""The run folder itself: who may write in it (a lock), and what run it holds (manifest.json).

The lock is two flocks held for as long as a run uses the folder: one on the folder's own
descriptor and one on `run.lock` inside it. The kernel drops both when the process ends, however
it ends, so a crashed run never leaves a stale lock. A lock on a file alone can be stolen by
deleting the file (the next run creates a new one and locks that); the folder's lock cannot, as
nothing can take the folder's name without removing or renaming the folder itself. The file's
lock stays because on NFS a directory's flock is only seen on its own host while the file's
reaches the server (from memory: the NFS client turns a file's flock into a POSIX lock on the
server). Both are checked after they are taken and again before every write to the folder
(`FolderLock.check`): the folder's path and `run.lock` must still name the locked inodes, else
the run stops before writing. run.lock keeps the pid, host and start time of its holder, to name
it when a second run is refused. The manifest is replaced atomically (written beside, fsynced,
renamed), so it is always either the old or the new one.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import json
import os
import platform
import re
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from sequencer.model.errors import StoreError, StoreReadError
from sequencer.store.atomic import replace_file, sync_folder, working_name

LOCK_FILE = "run.lock"
MANIFEST_FILE = "manifest.json"
MANIFEST_FORMAT = 1
RUN_FILES = ("manifest.json", "journal.jsonl", "results.sqlite")  # any of them: a run is here


class FolderRefused(StoreError, FileExistsError):
    """The run folder cannot be used as asked (in use, holds a run, holds none, other recipe)."""

    exit_code = 2

    def __init__(self, folder: Path | str, problem: str) -> None:
        super().__init__(f"{folder}: {problem}")
        self.folder, self.problem = str(folder), problem


def unwritable(folder: Path, exc: OSError, what: str = "cannot be written") -> StoreError:
    why = exc.strerror or type(exc).__name__
    return StoreError(f"{folder}: {what} ({why}); nothing was measured")


_TAKE_TRIES = 3  # a folder or lock file replaced while it was being locked: try again


@dataclass
class FolderLock:
    """An exclusive lock on a run folder. Take it with `FolderLock.take(folder)`; `check()`
    before each write proves it is still held."""

    folder: Path
    folder_fd: int | None
    file: IO[str] | None
    inodes: tuple[tuple[int, int], tuple[int, int]] = ((0, 0), (0, 0))

    @classmethod
    def take(cls, folder: Path) -> FolderLock:
        for _ in range(_TAKE_TRIES):
            lock = cls._try_take(folder)
            if lock is not None:
                return lock
        raise FolderRefused(folder, "keeps being replaced while it is locked; choose another --out")

    @classmethod
    def _try_take(cls, folder: Path) -> FolderLock | None:
        try:
            folder.mkdir(parents=True, exist_ok=True)
            folder_fd = os.open(folder, os.O_RDONLY | os.O_DIRECTORY)
        except OSError as exc:
            raise unwritable(folder, exc) from None
        lock = cls(folder, folder_fd, None)
        try:
            _flock(folder, folder_fd, lambda: _holder(folder))
            lock.file = _open_lock_file(folder)
            _flock(folder, lock.file.fileno(), lambda: _holder(folder))
            lock.inodes = (_inode_of(folder_fd), _inode_of(lock.file.fileno()))
            if lock.lost():  # replaced between open and flock: that lock guards nothing
                lock.release()
                return None
            _write_holder(lock.file)
        except OSError as exc:
            lock.release()
            if isinstance(exc, StoreError):
                raise
            raise unwritable(folder, exc) from None
        except BaseException:
            lock.release()
            raise
        return lock

    def lost(self) -> str:
        """Why the lock no longer guards the folder ('' while it does)."""
        if self.folder_fd is None or self.file is None:
            return "the lock was released"
        named = (("the folder", self.folder), (LOCK_FILE, self.folder / LOCK_FILE))
        for (what, path), held in zip(named, self.inodes, strict=True):
            try:
                now = _inode(os.stat(path))
            except FileNotFoundError:
                return f"{what} was removed"
            except OSError as exc:
                return f"{what} cannot be looked at ({exc.strerror or exc})"
            if now != held:
                return f"{what} was replaced"
        return ""

    def check(self, written: str = "") -> None:
        """Raise StoreError unless this process still holds the folder (before every write);
        `written`: what of the write at hand is on disk already, for the message."""
        why = self.lost()
        if why:
            raise LockLost(self.folder, why, written)

    def release(self) -> None:
        if self.file is not None:
            with contextlib.suppress(OSError):
                fcntl.flock(self.file.fileno(), fcntl.LOCK_UN)
            self.file.close()
            self.file = None
        if self.folder_fd is not None:
            with contextlib.suppress(OSError):
                os.close(self.folder_fd)  # closing drops the flock with it
            self.folder_fd = None


class LockLost(StoreError):
    """The run folder's lock no longer names this process's lock: the run stops writing."""

    def __init__(self, folder: Path | str, why: str, written: str = "") -> None:
        stopped = f"stopped with {written}" if written else "stopped before writing"
        super().__init__(
            f"{folder}: the run's lock was taken away ({why}); {stopped}, so that no second "
            "run writes here; what was stored is kept (--resume continues it)"
        )
        self.folder, self.why, self.written = str(folder), why, written


def _flock(folder: Path, fd: int, holder: Any) -> None:
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as exc:
        if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            raise unwritable(folder, exc, "cannot be locked") from None
        raise FolderRefused(
            folder, f"in use by another run ({holder()}); wait for it or choose another --out"
        ) from None


def _open_lock_file(folder: Path) -> IO[str]:
    return open(folder / LOCK_FILE, "a+", encoding="utf-8")  # held for the whole run


def _inode_of(fd: int) -> tuple[int, int]:
    return _inode(os.fstat(fd))


def _inode(st: os.stat_result) -> tuple[int, int]:
    return st.st_dev, st.st_ino


_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]+")


def folder_name(name: str) -> str:
    """A lot (or other name) as one folder name inside its parent: separators and anything a
    shell or another system reads specially become '_', and it cannot start with a dot, so
    `../../x` or `/etc` can never put a run folder outside `runs/`."""
    safe = _UNSAFE.sub("_", name).lstrip(".") or "_"
    return safe[:120]


def utc_now() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds")


def _write_holder(file: IO[str]) -> None:
    file.seek(0)
    file.truncate()
    file.write(f"pid {os.getpid()} on {platform.node()} since {utc_now()}\n")
    file.flush()


def _holder(folder: Path) -> str:
    """Who holds the folder, as its run.lock says (read only: a refused run creates nothing)."""
    try:
        text = (folder / LOCK_FILE).read_text(encoding="utf-8").strip()
    except FileNotFoundError:
        return f"holder unknown: its {LOCK_FILE} was removed"
    except (OSError, ValueError):
        return "holder unknown"
    return text or "holder unknown"


def holds_run(folder: Path) -> bool:
    return any((folder / name).exists() for name in RUN_FILES)


def never_reached(folder: Path) -> dict[str, Any] | None:
    """The manifest of the run in `folder` if that run never reached an instrument (so starting
    it again there loses nothing), else None. Never reached: a manifest of ours whose sessions
    name no instrument identity, an empty journal, no device in the database and nothing in any
    SCPI log (an instrument that answered *IDN? leaves its exchanges there)."""
    try:
        run = read_manifest(folder)
    except StoreError:
        return None
    sessions = run.get("sessions")
    if not isinstance(sessions, list) or any(_named_instrument(s) for s in [run, *sessions]):
        return None
    if _has_bytes(folder / "journal.jsonl") or _stored_devices(folder / "results.sqlite"):
        return None
    if any(_has_bytes(log) for log in folder.glob("scpi*.log")):
        return None
    return run


def clear_run(folder: Path) -> None:
    """Remove the files of a run that never reached its instrument (`never_reached`)."""
    extra = ("results.sqlite-wal", "results.sqlite-shm", "results.sqlite-journal", "devices.csv")
    spare = (working_name(folder / MANIFEST_FILE).name, MANIFEST_FILE + ".new", "devices.csv.new")
    for name in (*RUN_FILES, *extra, *spare):
        with contextlib.suppress(FileNotFoundError):
            (folder / name).unlink()
    sync_folder(folder)


def _named_instrument(record: Any) -> bool:
    return not isinstance(record, dict) or bool(record.get("identity"))


def _has_bytes(path: Path) -> bool:
    try:
        return path.stat().st_size > 0
    except FileNotFoundError:
        return False


def _stored_devices(path: Path) -> int:
    """Devices in a run database (1 when it cannot be read: then it is not ours to remove)."""
    if not path.exists():
        return 0
    try:
        db = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True)
        try:
            return int(db.execute("SELECT COUNT(*) FROM device").fetchone()[0])
        finally:
            db.close()
    except sqlite3.Error:
        return 1


def write_manifest(folder: Path, manifest: dict[str, Any]) -> None:
    """Replace manifest.json atomically and durably."""
    text = json.dumps({"manifest_format": MANIFEST_FORMAT, **manifest}, indent=2) + "\n"
    replace_file(folder / MANIFEST_FILE, text.encode("utf-8"))


def read_manifest(folder: Path) -> dict[str, Any]:
    path = folder / MANIFEST_FILE
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise FolderRefused(
            folder,
            "holds a run without manifest.json (an older ccbench's); it can be read "
            "with `ccbench results` but not resumed",
        ) from None
    except (OSError, ValueError) as exc:
        raise StoreReadError(f"{path}: cannot be read ({exc})") from None
    if not isinstance(data, dict) or data.get("manifest_format") != MANIFEST_FORMAT:
        raise StoreError(f"{path}: is not a ccbench run manifest (format {MANIFEST_FORMAT})")
    data.pop("manifest_format")
    return data
