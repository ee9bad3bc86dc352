"""A finished run on a read-only file system can be read (red-team finding 11: `results`,
`report --text` and `report` refused with "unable to open database file", `rejudge` gave a
traceback). SQLite's WAL mode needs a `-shm` file to read, which cannot be made there.

The read-only file system is real: a tmpfs mounted in a private mount namespace (`unshare -m`,
util-linux), remounted read-only after the run folder is copied in. Needs root, as CI has.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.skipif(
    os.geteuid() != 0 or shutil.which("unshare") is None,
    reason="mounting a read-only file system needs root and util-linux's unshare",
)


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("ro") / "run"
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", "recipes/demo.yaml", "--sim", "--out",
         str(out)],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stdout + done.stderr
    for leftover in out.glob("results.sqlite-*"):  # as a cleanly closed database leaves it
        leftover.unlink()
    return out


def _on_read_only(folder: Path, command: str) -> subprocess.CompletedProcess[str]:
    """`ccbench COMMAND FOLDER...` with the folder copied onto a read-only file system."""
    mount = folder.parent / "mnt"
    mount.mkdir(exist_ok=True)
    script = (
        f"mount -t tmpfs tmpfs {mount} && cp -r {folder} {mount}/done && "
        f"mount -o remount,ro {mount} && "
        f"{sys.executable} -m sequencer.cli {command.replace('FOLDER', f'{mount}/done')}"
    )
    return subprocess.run(
        ["unshare", "-m", "sh", "-c", script], cwd=ROOT, capture_output=True, text=True,
        timeout=300, env={**os.environ, "COLUMNS": "120"},
    )  # fmt: skip


@pytest.mark.parametrize("command", ["results FOLDER", "report --text FOLDER"])
def test_a_finished_run_is_read_where_nothing_can_be_written(finished_run, command):
    done = _on_read_only(finished_run, command)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "FK2611-07" in done.stdout and "unable to open" not in done.stdout + done.stderr


def test_the_html_report_of_a_read_only_run_is_written_elsewhere(finished_run, tmp_path):
    done = _on_read_only(finished_run, f"report FOLDER --out {tmp_path}")
    assert done.returncode == 0, done.stdout + done.stderr
    assert (tmp_path / "report.html").stat().st_size > 0


def test_rejudge_on_a_read_only_run_says_what_to_do(finished_run):
    done = _on_read_only(finished_run, "rejudge FOLDER --recipe recipes/demo.yaml")
    assert done.returncode != 0 and "Traceback" not in done.stdout + done.stderr
    assert "read-only file system" in done.stdout + done.stderr
    assert "copy the folder somewhere writable" in done.stdout + done.stderr
