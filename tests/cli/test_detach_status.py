"""Long runs: `ccbench run --detach` outlives its terminal, `ccbench status` reads any run from
outside without touching it. Real processes: a terminal (a pty and a shell in a session of its
own) is hung up and its whole process group killed while the detached run goes on."""

from __future__ import annotations

import csv
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
ENV = {"PATH": "/usr/bin:/bin", "COLUMNS": "80", "PYTHONPATH": str(ROOT)}
OFF = "output off (read back from the instrument)"

pytestmark = [pytest.mark.sim, pytest.mark.robustness]


def ccbench(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=ROOT, capture_output=True, text=True, timeout=120, env=ENV,
    )  # fmt: skip


def bench(folder: Path, channels: str) -> Path:
    station = (ROOT / "recipes/demo-station.yaml").read_text()
    station = station.replace("channels: 1-20", f"channels: {channels}")
    (folder / "demo-station.yaml").write_text(station)
    (folder / "demo.yaml").write_text((ROOT / "recipes/demo.yaml").read_text())
    return folder / "demo.yaml"


def status(out: Path) -> dict:
    done = ccbench("status", str(out), "--json")
    assert done.returncode == 0, done.stdout + done.stderr
    return json.loads(done.stdout)


def csv_rows(out: Path) -> list[dict[str, str]]:
    with open(out / "devices.csv", newline="") as f:
        return list(csv.DictReader(f))


def wait_for(check, seconds: float = 120.0, what: str = ""):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        found = check()
        if found:
            return found
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


def test_a_detached_run_outlives_its_terminal_and_status_follows_it(tmp_path):
    recipe, out = bench(tmp_path, "1-20"), tmp_path / "night"
    master, slave = os.openpty()
    command = (
        f"{sys.executable} -m sequencer.cli run {recipe} --sim --out {out} --detach; "
        "echo detached-with-$?; exec sleep 300"
    )
    terminal = subprocess.Popen(
        ["/bin/sh", "-c", command], cwd=ROOT, env=ENV,
        stdin=slave, stdout=slave, stderr=slave, start_new_session=True,
    )  # fmt: skip
    os.close(slave)
    screen = b""
    try:
        while b"detached-with-" not in screen:
            screen += os.read(master, 4096)
        assert b"detached-with-0" in screen or b"detached-with-" in screen
        screen += os.read(master, 4096) if b"detached-with-0" not in screen else b""
        assert b"detached-with-0" in screen, screen.decode(errors="replace")
        assert f"ccbench status {out}".encode() in screen
        first = status(out)
        assert first["state"] == "running", first
        child = first["holder"]["pid"]
        assert os.getsid(child) != os.getsid(terminal.pid)  # a session of its own
        assert first["stored"] < 20  # the terminal goes while the run is measuring
    finally:
        os.killpg(terminal.pid, signal.SIGHUP)  # the terminal closed ...
        os.close(master)
        os.killpg(terminal.pid, signal.SIGKILL)  # ... and everything in its group is gone
        terminal.wait(timeout=20)
    ended = wait_for(lambda: (s := status(out))["state"] != "running" and s, what="the run's end")
    assert ended["state"] == "completed", ended
    assert ended["ended"] == [f"completed; {OFF}"]
    assert ended["output"] == f"completed; {OFF}"
    assert ended["stored"] == 20 and len(csv_rows(out)) == 20
    assert ended["eta"] is None
    log = (out / "screen.log").read_text()
    assert log.rstrip().splitlines()[-1].startswith(OFF)  # its screen, to the last line


def test_status_counts_what_the_run_stored_and_how_it_ended(tmp_path):
    recipe, out = bench(tmp_path, "1-4"), tmp_path / "run"
    done = ccbench("run", str(recipe), "--sim", "--out", str(out))
    assert done.returncode == 0, done.stdout + done.stderr
    facts = status(out)
    rows = csv_rows(out)
    assert facts["stored"] == len(rows) == facts["done_in_round"] == facts["devices_per_round"]
    verdicts = {v: sum(r["verdict"] == v for r in rows) for v in {r["verdict"] for r in rows}}
    assert facts["verdicts"] == verdicts
    assert facts["state"] == "completed" and facts["holder"]["alive"] is False
    text = ccbench("status", str(out))
    assert text.returncode == 0 and text.stderr == ""
    assert "state: completed" in text.stdout
    assert f"output: completed; {OFF}" in text.stdout
    assert max(len(line) for line in text.stdout.splitlines()) <= 80 or str(out) in text.stdout


def test_status_of_a_killed_run_says_the_output_state_is_not_known(tmp_path):
    recipe, out = bench(tmp_path, "1-20"), tmp_path / "killed"
    run = subprocess.Popen(
        [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim", "--out", str(out)],
        cwd=ROOT, env=ENV, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )  # fmt: skip
    try:
        wait_for(lambda: status_running(out), what="a running run with a stored device")
        os.kill(run.pid, signal.SIGKILL)
    finally:
        run.wait(timeout=30)
    facts = status(out)
    assert facts["state"].startswith("stopped without recording its end"), facts
    assert facts["output"].startswith("NOT RECORDED")
    assert facts["eta"] is None


def status_running(out: Path) -> bool:
    if not (out / "manifest.json").exists():
        return False
    facts = status(out)
    return facts["state"] == "running" and facts["stored"] >= 1


def test_status_never_takes_the_lock_a_run_needs(tmp_path):
    """Looking at a folder between runs leaves it free: the next run takes it at once."""
    recipe, out = bench(tmp_path, "1-2"), tmp_path / "run"
    assert ccbench("run", str(recipe), "--sim", "--out", str(out)).returncode == 0
    before = sorted(p.name for p in out.iterdir())
    assert status(out)["state"] == "completed"
    assert sorted(p.name for p in out.iterdir()) == before  # nothing written, nothing added
    again = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume", "--rounds", "2")
    assert again.returncode == 0, again.stdout + again.stderr


@pytest.mark.parametrize(
    ("extra", "words"),
    [
        (("--part-by-part",), "--detach cannot be used with --part-by-part"),
        (("--resume",), "--resume needs --out"),
    ],
)
def test_detach_refuses_what_needs_a_terminal_in_one_line(tmp_path, extra, words):
    recipe = bench(tmp_path, "1-2")
    done = ccbench("run", str(recipe), "--sim", "--detach", *extra)
    assert done.returncode == 2, done.stdout + done.stderr
    assert words in done.stderr and len(done.stderr.strip().splitlines()) == 1
    assert not (ROOT / "runs").exists() or not any(
        (p / "screen.log").exists() for p in (ROOT / "runs").glob("FK2611-07-*")
    )


def test_a_detached_run_that_cannot_have_its_folder_hands_back_its_error(tmp_path):
    recipe, out = bench(tmp_path, "1-2"), tmp_path / "run"
    assert ccbench("run", str(recipe), "--sim", "--out", str(out)).returncode == 0
    done = ccbench("run", str(recipe), "--sim", "--out", str(out), "--detach")
    assert done.returncode == 2, done.stdout + done.stderr
    assert "the background run ended at once (exit 2)" in done.stderr
    assert "already holds a run" in done.stderr or "holds a run" in done.stderr
    assert len(csv_rows(out)) == 2  # nothing measured again


@pytest.mark.parametrize(
    ("make", "words"),
    [
        (lambda p: p / "missing", "no such run folder"),
        (lambda p: p, "holds no run; `ccbench status` needs its manifest.json"),
    ],
)
def test_status_of_a_folder_without_a_run_is_one_line_and_exit_2(tmp_path, make, words):
    done = ccbench("status", str(make(tmp_path)), "--json")
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr.strip() == f"ccbench: {make(tmp_path)}: {words}"


def _running(tally, planned, started="2026-12-03T07:00:00+00:00"):
    from sequencer.store.runstatus import Holder, RunStatus

    manifest = {"started": started, "status": "running", "planned": planned,
                "sessions": [{"session": 1}]}  # fmt: skip
    return RunStatus(Path("runs/x"), manifest, tally, Holder(1, "here", "", True))


def test_the_expected_end_comes_from_the_estimate_then_from_the_pace():
    import datetime as dt

    from sequencer.cli.statuscmd import describe
    from sequencer.store.runstatus import Tally

    now = dt.datetime(2026, 12, 3, 7, 10, tzinfo=dt.UTC)
    planned = {"devices_per_round": 20, "seconds_per_device": 0.5, "schedule": None}
    one = Tally(1, {"pass": 1}, 1, 1, 1, "2026-12-03T07:09:59+00:00", "2026-12-03T07:09:59+00:00")
    eta = describe(_running(one, planned), now)["eta"]
    assert eta["seconds"] == pytest.approx(19 * 0.5) and "estimate" in eta["basis"]
    # 5 devices over 8 s of this session: 2 s a device, 15 left in the pass
    five = Tally(5, {"pass": 5}, 1, 5, 5, "2026-12-03T07:09:50+00:00", "2026-12-03T07:09:58+00:00")
    eta = describe(_running(five, planned), now)["eta"]
    assert eta["pace_s"] == pytest.approx(2.0) and eta["seconds"] == pytest.approx(15 * 2.0)
    # three rounds, one every 60 s: the two rounds still to come take 60 s each (40 s of work)
    every = planned | {"schedule": {"every_s": 60.0, "for_s": None, "rounds": 3}}
    eta = describe(_running(five, every), now)["eta"]
    assert eta["seconds"] == pytest.approx(15 * 2.0 + 2 * 60.0)
    # until stopped: no end to expect
    open_ended = planned | {"schedule": {"every_s": 60.0, "for_s": None, "rounds": None}}
    assert describe(_running(five, open_ended), now)["eta"]["at"] is None


def test_detach_into_a_folder_in_use_is_refused_before_writing_there(tmp_path):
    recipe, out = bench(tmp_path, "1-2"), tmp_path / "busy"
    run = subprocess.Popen(  # holds its folder while it waits a minute for its second round
        [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--sim", "--out", str(out),
         "--every", "60 s", "--rounds", "2"],
        cwd=ROOT, env=ENV, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )  # fmt: skip
    try:
        wait_for(lambda: status_running(out), what="a running run with a stored device")
        done = ccbench("run", str(recipe), "--sim", "--out", str(out), "--resume", "--detach")
        assert done.returncode == 2 and done.stdout.count("run started") == 0
        assert f"in use by another run (pid {run.pid} on " in done.stderr, done.stderr
        assert not (out / "screen.log").exists()  # nothing written into the busy folder
    finally:
        run.terminate()
        run.wait(timeout=60)
