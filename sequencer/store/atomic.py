"""Replacing a file so that a reader finds the old one or the new one, never a part.

Written beside the target under a working name, flushed to the disk, then renamed over it (a
rename within a folder is atomic on POSIX file systems); a failed write removes the working
file and leaves the old one as it was. A `kill -9` mid-write leaves only the working file.
"""

from __future__ import annotations

import os
from pathlib import Path


def replace_file(path: Path, data: bytes) -> None:
    """`path` now holds `data`, or (on OSError, raised) still what it held before."""
    part = working_name(path)
    try:
        with open(part, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(part, path)
    except OSError:
        part.unlink(missing_ok=True)
        raise
    sync_folder(path.parent)


def working_name(path: Path) -> Path:
    return path.with_name(f".{path.name}.part")


def sync_folder(folder: Path) -> None:
    """fsync the folder so that a rename or a new file survives a power cut."""
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
