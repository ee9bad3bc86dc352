"""A first connection that never reached the instrument: the message says in words what did not
answer where, and the same command again may use the folder (it holds nothing measured). A real
`ccbench run` process against real sockets: a port nobody listens on, and a listener whose queue
of waiting connections is full, so a connect is never answered (the kernel drops the request)."""

from __future__ import annotations

import json
import socket
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from sequencer.store.runfolder import never_reached
from sequencer.store.runstore import RunStore
from tests.store.conftest import write_recipe

ROOT = Path(__file__).resolve().parents[2]
HELD = "already holds a run"
AGAIN = "held a run that never reached its instrument (nothing measured); started it again there"

pytestmark = pytest.mark.robustness


def ccbench(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=ROOT, capture_output=True, text=True, timeout=120,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "400", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def recipe_on(tmp_path: Path, resource: str) -> Path:
    """The store tests' small recipe, its station pointed at `resource`."""
    recipe = write_recipe(tmp_path / "recipes", channels=3)
    station = recipe.parent / "station.yaml"
    real = f"resource: '{resource}', timeout: 0.5 s"
    station.write_text(station.read_text().replace("resource: sim, timeout: 5 s", real))
    return recipe


@pytest.fixture
def free_port() -> int:
    """A port on 127.0.0.1 that nothing listens on (bound once, then released)."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@pytest.fixture
def unanswered_port() -> Iterator[int]:
    """A port whose listener never accepts and whose queue is full: a connect gets no answer."""
    listener = socket.socket()
    listener.bind(("127.0.0.1", 0))
    listener.listen(0)
    port = listener.getsockname()[1]
    fillers = [socket.socket() for _ in range(3)]
    for filler in fillers:
        filler.setblocking(False)
        filler.connect_ex(("127.0.0.1", port))
    yield port
    for s in (*fillers, listener):
        s.close()


def test_a_refused_first_connection_leaves_the_folder_reusable(tmp_path, free_port):
    recipe = recipe_on(tmp_path, f"TCPIP0::127.0.0.1::{free_port}::SOCKET")
    out = tmp_path / "run"
    first = ccbench("run", str(recipe), "--out", str(out))
    words = f"nothing answered at 127.0.0.1 port {free_port} (connection refused"
    assert first.returncode == 4 and words in first.stderr, first.stdout + first.stderr
    uid = json.loads((out / "manifest.json").read_text())["uid"]

    again = ccbench("run", str(recipe), "--out", str(out))  # the same command, once more
    assert again.returncode == 4 and words in again.stderr, again.stdout + again.stderr
    assert HELD not in again.stderr and again.stdout.count(AGAIN) == 1

    done = ccbench("run", str(recipe), "--sim", "--out", str(out))  # the instrument answers
    assert done.returncode == 0, done.stdout
    assert done.stdout.count(AGAIN) == 1
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["uid"] == uid and len(manifest["sessions"]) == 1
    assert manifest["status"] == "completed" and manifest["identity"]
    assert (out / "journal.jsonl").read_text().count("\n") == 3

    measured = ccbench("run", str(recipe), "--sim", "--out", str(out))  # now it holds results
    assert measured.returncode == 2 and f"{HELD}; add --resume" in measured.stderr


def test_a_connect_nobody_answers_is_said_in_words_not_a_status_number(tmp_path, unanswered_port):
    recipe = recipe_on(tmp_path, f"TCPIP0::127.0.0.1::{unanswered_port}::SOCKET")
    out = tmp_path / "run"
    for attempt in range(2):
        done = ccbench("run", str(recipe), "--out", str(out))
        last = done.stderr.strip().splitlines()[-1]  # errors: stderr when piped
        assert done.returncode == 4, done.stdout + done.stderr
        assert f"nothing answered at 127.0.0.1 port {unanswered_port} within 0.5 s" in last
        screen = done.stdout + done.stderr
        assert "-1073807339" not in screen and "VI_ERROR" not in screen
        assert HELD not in screen and done.stdout.count(AGAIN) == attempt


@pytest.mark.parametrize("evidence", ["journal", "scpi.log", "identity"])
def test_a_folder_whose_run_reached_its_instrument_is_not_reused(tmp_path, evidence):
    folder = tmp_path / "run"
    store = RunStore.create(folder, {"started": "2026-05-04T22:00:00.000+00:00", "lot": "L"})
    if evidence == "identity":
        store.set_identity("TCPIP0::127.0.0.1::5025::SOCKET", "TEST,SMU,1,1")
    store.finish("failed", "2026-05-04T22:00:01.000+00:00")
    assert (never_reached(folder) is None) == (evidence == "identity")
    if evidence != "identity":
        name = "journal.jsonl" if evidence == "journal" else "scpi.log"
        (folder / name).write_text('{"seq":1}\n' if evidence == "journal" else "> *IDN?\n")
    assert never_reached(folder) is None
