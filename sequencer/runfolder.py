"""The run folder itself: who may write in it (a lock), and what run it holds (manifest.json).

The lock is an fcntl lock on `run.lock`, held for as long as a run uses the folder; the kernel
drops it when the process ends, however it ends, so a crashed run never leaves a stale lock.
The file keeps the pid, host and start time of its holder, to name it when a second run is
refused. The manifest is replaced atomically (written beside, fsynced, renamed), so it is
always either the old or the new one.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import json
import os
import platform
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from .errors import StoreError

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


@dataclass
class FolderLock:
    """An exclusive lock on a run folder. Take it with `FolderLock.take(folder)`."""

    folder: Path
    file: IO[str] | None

    @classmethod
    def take(cls, folder: Path) -> FolderLock:
        try:
            folder.mkdir(parents=True, exist_ok=True)
            file = open(folder / LOCK_FILE, "a+", encoding="utf-8")  # noqa: SIM115 - held
        except OSError as exc:
            raise unwritable(folder, exc) from None
        try:
            fcntl.flock(file.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            holder = _holder(file)
            file.close()
            if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise unwritable(folder, exc, "cannot be locked") from None
            raise FolderRefused(
                folder, f"in use by another run ({holder}); wait for it or choose another --out"
            ) from None
        try:
            _write_holder(file)
        except OSError as exc:
            file.close()
            raise unwritable(folder, exc) from None
        return cls(folder, file)

    def release(self) -> None:
        if self.file is not None:
            with contextlib.suppress(OSError):
                fcntl.flock(self.file.fileno(), fcntl.LOCK_UN)
            self.file.close()
            self.file = None


def utc_now() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds")


def _write_holder(file: IO[str]) -> None:
    file.seek(0)
    file.truncate()
    file.write(f"pid {os.getpid()} on {platform.node()} since {utc_now()}\n")
    file.flush()


def _holder(file: IO[str]) -> str:
    with contextlib.suppress(OSError):
        file.seek(0)
        text = file.read().strip()
        if text:
            return text
    return "holder unknown"


def holds_run(folder: Path) -> bool:
    return any((folder / name).exists() for name in RUN_FILES)


def write_manifest(folder: Path, manifest: dict[str, Any]) -> None:
    """Replace manifest.json atomically and durably."""
    path = folder / MANIFEST_FILE
    spare = folder / (MANIFEST_FILE + ".new")
    text = json.dumps({"manifest_format": MANIFEST_FORMAT, **manifest}, indent=2) + "\n"
    with open(spare, "w", encoding="utf-8") as f:
        f.write(text)
        f.flush()
        os.fsync(f.fileno())
    os.replace(spare, path)
    _sync_folder(folder)


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
        raise StoreError(f"{path}: cannot be read ({exc})") from None
    if not isinstance(data, dict) or data.get("manifest_format") != MANIFEST_FORMAT:
        raise StoreError(f"{path}: is not a ccbench run manifest (format {MANIFEST_FORMAT})")
    data.pop("manifest_format")
    return data


def _sync_folder(folder: Path) -> None:
    """fsync the folder so that a rename or a new file survives a power cut."""
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
