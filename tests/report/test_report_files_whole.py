"""Report files are replaced whole: a full disk (or a kill) mid-write leaves the previous report
as it was, never a 0-byte report.html or a cut PNG (red-team finding 24).

The full disk is real: a small tmpfs in a private mount namespace (`unshare -m`, util-linux)
filled with a file after a first report was written. Needs root, as CI has.
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
    reason="mounting a small file system needs root and util-linux's unshare",
)


def test_a_full_disk_leaves_the_previous_report_whole(tmp_path):
    run = tmp_path / "run"
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", "recipes/demo.yaml", "--sim", "--out",
         str(run)],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert done.returncode == 0, done.stdout + done.stderr
    mount, saved = tmp_path / "mnt", tmp_path / "saved"
    mount.mkdir()
    report = f"{sys.executable} -m sequencer.cli report {run} --out {mount}/rep"
    script = (
        f"mount -t tmpfs -o size=4m tmpfs {mount} && {report} > /dev/null && "
        f"cp -r {mount}/rep {saved} && "
        f"(dd if=/dev/zero of={mount}/filler bs=64k 2>/dev/null; true) && "
        f"{{ {report}; rc=$?; ls -A {mount}/rep > {tmp_path}/after.txt; "
        f"for f in {saved}/*; do cmp -s $f {mount}/rep/$(basename $f) || basename $f; done "
        f"> {tmp_path}/changed.txt; exit $rc; }}"
    )
    done = subprocess.run(
        ["unshare", "-m", "sh", "-c", script], cwd=ROOT, capture_output=True, text=True,
        timeout=300,
    )  # fmt: skip
    screen = done.stdout + done.stderr
    assert done.returncode == 5 and "the report cannot be written" in screen, screen
    assert "Traceback" not in screen
    # Read in the namespace before the file system went away: the failed report changed none
    # of the first report's files and left no working file behind.
    assert (tmp_path / "changed.txt").read_text() == ""
    after = (tmp_path / "after.txt").read_text().split()
    assert sorted(after) == sorted(p.name for p in saved.iterdir()), after
    assert "report.html" in after
