"""Endings a user meets outside the lab's plan, each on a real `ccbench run` process where it
can be: the terminal closed (a pseudo-terminal that is the run's controlling terminal, hung
up), a pipe whose reader went away, a storm of signals, a full file system, an instrument that
never answers, an output that will not read off. Every time: the output ends off and read back
(a second connection of our own reads it) or the screen says it may be on and the exit code
says so, the run record says how the run ended, and what was measured is kept."""

from __future__ import annotations

import contextlib
import errno
import fcntl
import io
import json
import os
import select
import signal
import sqlite3
import subprocess
import sys
import termios
import time
from pathlib import Path

import pytest
from rich.console import Console

from instruments.scpi import message_units
from sequencer.cli.main import main
from tests.safety.bench import (
    ROOT,
    SilentInstrument,
    loop_bench,
    read_output,
    start_sim_process,
    write_bench,
)
from tests.safety.test_guard import assert_output_off, run_loop
from tests.safety.test_signals import SLOW_STEPS, lines, wait_for
from tests.store.test_write_faults import stored, tiny_filesystem

ENV = {"PATH": "/usr/bin:/bin", "COLUMNS": "300", "PYTHONPATH": str(ROOT)}
OFF = "output off (read back from the instrument)"


@pytest.fixture
def sim():
    process = start_sim_process("--devices", "6", "--seed", "7")
    yield process
    process.stop()


def slow_bench(folder: Path, resource: str) -> Path:
    station = {"instrument": {"resource": resource, "timeout": "2 s"}, "tray": {"channels": 6}}
    return write_bench(folder, station=station, recipe={"steps": SLOW_STEPS, "nplc": 1})


def run_command(recipe: Path, out: Path, *more: str) -> list[str]:
    return [sys.executable, "-m", "sequencer.cli", "run", str(recipe), "--out", str(out), *more]


def session_record(out: Path) -> tuple[dict, tuple]:
    """The last session as manifest.json and as the store's session table keep it."""
    entry = json.loads((out / "manifest.json").read_text())["sessions"][-1]
    db = sqlite3.connect(out / "results.sqlite")
    try:
        row = db.execute("SELECT status, ended FROM session ORDER BY session DESC").fetchone()
    finally:
        db.close()
    return entry, row


def last_reasons(out: Path) -> tuple[str, str]:
    db = sqlite3.connect(out / "results.sqlite")
    try:
        return db.execute("SELECT verdict, reasons FROM device ORDER BY seq DESC").fetchone()
    finally:
        db.close()


# --- the terminal closed ------------------------------------------------------------------------


def _take_terminal() -> None:
    """In the child, after setsid: make the pseudo-terminal on fd 0 the controlling terminal,
    as a login shell's terminal is for the programs started from it."""
    fcntl.ioctl(0, termios.TIOCSCTTY, 0)


def controlling_terminal(pid: int) -> int:
    """tty_nr of /proc/<pid>/stat (proc(5)): 0 when the process has no controlling terminal."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return int(fields[4])


def drain(master: int, seconds: float) -> None:
    """Read the terminal's screen for `seconds`, so that the run never blocks writing to it."""
    deadline = time.monotonic() + seconds
    while (left := deadline - time.monotonic()) > 0:
        ready, _, _ = select.select([master], [], [], min(left, 0.05))
        if ready:
            with contextlib.suppress(OSError):
                os.read(master, 65536)


@pytest.mark.sim
@pytest.mark.robustness
def test_closing_the_terminal_mid_sweep_switches_off_and_records_it(tmp_path, sim):
    path, out = slow_bench(tmp_path, sim.resource), tmp_path / "run"
    master, slave = os.openpty()
    run = subprocess.Popen(
        run_command(path, out), cwd=ROOT, env={**ENV, "TERM": "xterm"},
        stdin=slave, stdout=slave, stderr=slave,
        start_new_session=True, preexec_fn=_take_terminal,
    )  # fmt: skip
    os.close(slave)
    try:
        deadline = time.monotonic() + 30
        while lines(out / "journal.jsonl") < 1 and time.monotonic() < deadline:
            drain(master, 0.1)
        drain(master, 0.3)  # well into the second device's sweep
        assert controlling_terminal(run.pid) != 0  # the pseudo-terminal is its terminal
        assert read_output(sim.resource) == "1"  # the output really is on at this moment
        os.close(master)  # the terminal window closes: the kernel hangs the terminal up
        run.wait(timeout=30)
    finally:
        run.kill()
    assert run.returncode == 130
    assert read_output(sim.resource) == "0"  # a second, independent connection
    entry, row = session_record(out)
    assert entry["status"] == row[0] == "interrupted"
    assert entry["ended"] == row[1]
    assert row[1].startswith(f"stopped by SIGHUP; {OFF}; what was measured is kept in {out}")
    assert "the screen (stdout) went away" in row[1]  # after the hang-up every write fails
    verdict, reasons = last_reasons(out)
    assert verdict == "aborted" and "stopped by SIGHUP" in reasons
    assert not (out / "traceback.txt").exists()


@pytest.mark.sim
@pytest.mark.robustness
def test_a_run_started_under_nohup_goes_on_when_its_terminal_hangs_up(tmp_path, sim):
    # nohup(1) starts a program with SIGHUP ignored (POSIX, common practice, no source): the
    # user asked for the run to outlive the terminal, so ccbench keeps it ignored.
    path, out = slow_bench(tmp_path, sim.resource), tmp_path / "run"
    run = subprocess.Popen(
        ["nohup", *run_command(path, out)], cwd=tmp_path, env=ENV,
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )  # fmt: skip
    try:
        assert wait_for(lambda: lines(out / "journal.jsonl") >= 1, 30), "no device finished"
        run.send_signal(signal.SIGHUP)
        run.wait(timeout=60)
    finally:
        run.kill()
    assert run.returncode == 0
    assert lines(out / "journal.jsonl") == 6
    entry, row = session_record(out)
    assert row == ("completed", f"completed; {OFF}") and entry["ended"] == row[1]


# --- the screen's reader went away ---------------------------------------------------------------


@pytest.mark.sim
@pytest.mark.robustness
def test_a_closed_screen_pipe_lets_the_run_finish_into_its_folder(tmp_path, sim):
    # `ccbench run ... 2>&1 | head -1`: the reader takes one line and goes away; every later
    # write meets a closed pipe (EPIPE). The run goes on, the folder gets everything.
    path, out = slow_bench(tmp_path, sim.resource), tmp_path / "run"
    run = subprocess.Popen(
        run_command(path, out), cwd=ROOT, env=ENV,
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
    )  # fmt: skip
    try:
        assert run.stdout is not None
        assert run.stdout.readline().startswith(b"Caution:")
        run.stdout.close()  # the reader is gone
        run.wait(timeout=60)
    finally:
        run.kill()
    assert run.returncode == 0
    assert read_output(sim.resource) == "0"
    journal, in_db, in_csv = stored(out)
    assert len(journal) == 6 and in_db == in_csv == journal
    entry, row = session_record(out)
    assert row[0] == "completed" and entry["ended"] == row[1]
    assert row[1].startswith(f"completed; {OFF}; the screen (stdout) went away at ")
    assert "Broken pipe" in row[1]


# --- signal storms ----------------------------------------------------------------------------


STORMS = [(signal.SIGTERM, "SIGTERM"), (signal.SIGINT, "Ctrl-C"), (signal.SIGHUP, "SIGHUP")]


@pytest.mark.sim
@pytest.mark.robustness
@pytest.mark.parametrize(("signum", "why"), STORMS)
def test_a_storm_of_signals_still_ends_with_the_documented_code_and_line(
    tmp_path, sim, signum, why
):
    path, out = slow_bench(tmp_path, sim.resource), tmp_path / "run"
    with open(tmp_path / "screen.txt", "w") as screen:
        run = subprocess.Popen(
            run_command(path, out), cwd=ROOT, env=ENV, stdout=screen, stderr=subprocess.STDOUT
        )
    try:
        assert wait_for(lambda: lines(out / "journal.jsonl") >= 1, 30), "no device finished"
        sent = 0
        while run.poll() is None:  # through the shutdown, the record, the last line and exit
            run.send_signal(signum)
            sent += 1
            time.sleep(0.002)
    finally:
        run.kill()
    last = (tmp_path / "screen.txt").read_text().strip().splitlines()[-1]
    assert run.returncode == 130, last
    assert last.startswith(f"ccbench: stopped by {why}; {OFF}")
    assert sent > 20 and read_output(sim.resource) == "0"


# --- a full file system --------------------------------------------------------------------------


def demo_station_at(folder: Path, resource: str) -> Path:
    text = (ROOT / "recipes" / "demo-station.yaml").read_text()
    path = folder / "station.yaml"
    path.write_text(text.replace("resource: sim", f"resource: '{resource}'"))
    return path


@pytest.mark.sim
@pytest.mark.robustness
def test_a_file_system_that_fills_up_mid_run_ends_with_code_5_and_the_output_off(tmp_path):
    sim = start_sim_process("--devices", "20", "--seed", "2611")
    try:
        station = demo_station_at(tmp_path, sim.resource)
        with tiny_filesystem(tmp_path / "tiny", "240k") as remount:
            out = tmp_path / "tiny" / "run"
            command = run_command(ROOT / "recipes" / "demo.yaml", out, "--station", str(station))
            done = subprocess.run(command, cwd=ROOT, env=ENV, capture_output=True, text=True)
            last = done.stderr.strip().splitlines()[-1]  # the error line: stderr when piped
            assert done.returncode == 5, done.stdout + done.stderr
            assert "Traceback" not in done.stdout + done.stderr
            assert last.startswith("ccbench: ") and last.endswith(f"; {OFF}")
            assert "No space left on device" in last or "disk is full" in last
            assert read_output(sim.resource) == "0"
            journal = stored(out)[0]
            assert 0 < len(journal) < 20

            remount("rw,size=8m")
            done = subprocess.run([*command, "--resume"], cwd=ROOT, env=ENV,
                                  capture_output=True, text=True)  # fmt: skip
            assert done.returncode == 0, done.stdout + done.stderr
            journal, in_db, in_csv = stored(out)
            names = [f"FK2611-07-{c:03d}" for c in range(1, 21)]
            assert in_csv == in_db == journal == names  # every device once, nothing lost
    finally:
        sim.stop()


class FillingLog:
    """scpi.log on a disk that fills up: once `disk["full"]` holds, every write, flush and
    close fails with ENOSPC, as they do when the kernel has no block left for buffered bytes."""

    def __init__(self, real, disk: dict[str, bool]) -> None:
        self.real, self.disk = real, disk

    def _check(self) -> None:
        if self.disk["full"]:
            raise OSError(errno.ENOSPC, "No space left on device")

    def write(self, text: str) -> int:
        self._check()
        return self.real.write(text)

    def flush(self) -> None:
        self._check()
        self.real.flush()

    def close(self) -> None:
        self.real.close()
        self._check()

    def __enter__(self) -> FillingLog:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


@pytest.mark.sim
@pytest.mark.robustness
def test_the_first_write_error_is_shown_when_every_later_write_fails_too(tmp_path, monkeypatch):
    import builtins

    from tests.store.conftest import write_recipe

    recipe, out = write_recipe(tmp_path / "recipes", channels=5), tmp_path / "run"
    real_open, real_fsync, disk, journal_syncs = builtins.open, os.fsync, {"full": False}, []

    def fsync(fd: int) -> None:
        if os.readlink(f"/proc/self/fd/{fd}").endswith("journal.jsonl"):
            journal_syncs.append(fd)
            disk["full"] = disk["full"] or len(journal_syncs) == 3  # the third device's line
        if disk["full"]:
            raise OSError(errno.ENOSPC, "No space left on device")
        real_fsync(fd)

    def opened(path, mode="r", *args, **kwargs):
        writes_inside = str(path).startswith(str(out)) and any(m in mode for m in "wax+")
        if writes_inside and disk["full"]:
            raise OSError(errno.ENOSPC, "No space left on device", str(path))
        if writes_inside and str(path).endswith("scpi.log"):
            return FillingLog(real_open(path, mode, *args, **kwargs), disk)
        return real_open(path, mode, *args, **kwargs)

    monkeypatch.setattr(os, "fsync", fsync)
    monkeypatch.setattr(builtins, "open", opened)
    text = io.StringIO()
    try:
        code = main(["run", str(recipe), "--sim", "--out", str(out)],
                    console=Console(file=text, width=300, highlight=False))  # fmt: skip
    finally:
        monkeypatch.undo()
    assert disk["full"]
    assert code == 5, text.getvalue()
    assert text.getvalue().strip().splitlines()[-1] == (
        f"ccbench: {out}: result of FK2611-07-003 could not be written (No space left on "
        f"device); everything before it is kept; {OFF}"
    )
    assert stored(out)[0] == ["FK2611-07-001", "FK2611-07-002"]


# --- instruments that do not answer, outputs that will not read off -----------------------------


@pytest.mark.robustness
def test_an_instrument_that_never_answers_leaves_the_output_state_unknown(tmp_path):
    with SilentInstrument() as silent:
        station = {"instrument": {"resource": silent.resource, "timeout": "0.5 s"}}
        path = write_bench(tmp_path, station=station)
        text = io.StringIO()
        code = main(["run", str(path), "--out", str(tmp_path / "run")],
                    console=Console(file=text, width=300, highlight=False))  # fmt: skip
    last = text.getvalue().strip().splitlines()[-1]
    assert code == 4, last
    assert "never switched on" not in last
    assert last.endswith(
        "ccbench switched nothing on, but could not read the output's state: check it at the "
        "instrument"
    )
    assert silent.received and all(m == "*IDN?" for m in silent.received)  # asked, nothing more


@pytest.mark.sim
@pytest.mark.robustness
def test_of_two_instruments_the_one_that_never_answered_is_named_unknown(tmp_path):
    import yaml

    from tests.safety.bench import STATION

    with SilentInstrument() as silent:
        station = {k: v for k, v in STATION.items() if k not in ("instrument", "tray")}
        station["instruments"] = [
            {"name": "bay-1", "resource": "sim", "channels": "1-2", "timeout": "1 s"},
            {"name": "bay-2", "resource": silent.resource, "channels": [3], "timeout": "0.5 s"},
        ]
        path = write_bench(tmp_path)
        (tmp_path / "station.yaml").write_text(yaml.safe_dump(station))
        text = io.StringIO()
        code = main(["run", str(path), "--out", str(tmp_path / "run")],
                    console=Console(file=text, width=300, highlight=False))  # fmt: skip
    last = text.getvalue().strip().splitlines()[-1]
    assert code == 4, last
    assert last.endswith(
        f"bay-1: {OFF}; bay-2: ccbench switched nothing on, but could not read the output's "
        "state: check it at the instrument"
    )


@pytest.mark.robustness
@pytest.mark.parametrize("reply", ["1", "garbage"])
def test_an_output_not_read_back_off_gives_exit_code_6(tmp_path, monkeypatch, reply):
    bench = loop_bench()
    real, asked = bench.handler, []

    def stuck_on(message: str):
        if "OUTP?" in message_units(message):
            asked.append(message)
            if len(asked) > 1 and message == "OUTP?":  # the safe start's read-back is true
                return reply
        return real(message)

    bench.handler = stuck_on
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    last = text.strip().splitlines()[-1]
    assert len(rows) == 3  # the run itself completed
    assert "THE OUTPUT MAY STILL BE ON" in last
    assert code == 6, last
    assert_output_off(bench)  # the simulated output is off: only its read-back lied
    entry = json.loads((tmp_path / "run" / "manifest.json").read_text())["sessions"][-1]
    assert entry["status"] == "completed" and "THE OUTPUT MAY STILL BE ON" in entry["ended"]


@pytest.mark.robustness
def test_a_stop_with_the_output_not_read_back_off_gives_exit_code_6(tmp_path, monkeypatch):
    bench = loop_bench()
    real, reads = bench.handler, []

    def interrupted_then_stuck(message: str):
        units = message_units(message)
        if "READ?" in units:
            reads.append(message)
            if len(reads) == 25:  # device 2, mid-sweep
                raise KeyboardInterrupt("stopped by Ctrl-C")
        if reads and message == "OUTP?":
            return "1"
        return real(message)

    bench.handler = interrupted_then_stuck
    code, text, _ = run_loop(tmp_path, monkeypatch, bench)
    last = text.strip().splitlines()[-1]
    assert last.startswith("ccbench: stopped by Ctrl-C; THE OUTPUT MAY STILL BE ON")
    assert code == 6, last


@pytest.mark.sim
@pytest.mark.robustness
def test_a_closed_stderr_does_not_change_the_exit_code(tmp_path):
    # The link drops mid-run: the shutdown warns on stderr while it reconnects, and nobody
    # reads stderr any more (its pipe's reader is gone), so that warning cannot be written.
    sim = start_sim_process("--devices", "6", "--seed", "7", "--fault", "close:on=READ?,after=40")
    try:
        path, out = slow_bench(tmp_path, sim.resource), tmp_path / "run"
        with open(tmp_path / "screen.txt", "w") as screen:
            run = subprocess.Popen(
                run_command(path, out), cwd=ROOT, env=ENV, stdout=screen, stderr=subprocess.PIPE
            )
        try:
            assert run.stderr is not None
            run.stderr.close()  # the reader is gone before anything was written
            run.wait(timeout=60)
        finally:
            run.kill()
        last = (tmp_path / "screen.txt").read_text().strip().splitlines()[-1]
        assert run.returncode == 4, last
        assert last.endswith("reconnected once and switched the output off (read back)")
        assert read_output(sim.resource) == "0"
    finally:
        sim.stop()
