"""EmbeddedSimulator: command line, start-up failures, and stopping, with stand-in programs.

The stand-ins are tiny modules run with `python -m`, exactly as the real simulator is run.
"""

from __future__ import annotations

import json
import sys
import textwrap
import time
from pathlib import Path

import pytest

from instruments import embedded
from instruments.embedded import EmbeddedSimulator, simulator_command
from instruments.errors import InstrumentError

RESOURCE = "TCPIP0::127.0.0.1::5999::SOCKET"


@pytest.fixture
def stand_in(tmp_path: Path, monkeypatch: pytest.MonkeyPatch):
    """Write a module `name` whose __main__ is `body`; it is importable by the child."""
    monkeypatch.setenv("PYTHONPATH", str(tmp_path))

    def write(name: str, body: str) -> str:
        package = tmp_path / name
        package.mkdir()
        (package / "__init__.py").write_text("")
        header = "import json, sys, time, pathlib\nHERE = pathlib.Path(__file__).parent\n"
        (package / "__main__.py").write_text(header + textwrap.dedent(body))
        return name

    return write


def test_command_line_from_options() -> None:
    command = simulator_command({"seed": 7, "defect_rate": 0.1, "clock": "virtual"})
    assert command[:3] == [sys.executable, "-m", "simulator"]
    assert command[3:] == [
        "serve",
        "--port",
        "0",
        "--exit-with-stdin",
        "--seed",
        "7",
        "--defect-rate",
        "0.1",
        "--clock",
        "virtual",
    ]


def test_unknown_option_is_refused_before_starting() -> None:
    with pytest.raises(InstrumentError, match="unknown simulator option 'speed'"):
        EmbeddedSimulator().start({"speed": 3})


def test_start_returns_the_resource_and_stop_ends_it(stand_in, tmp_path: Path) -> None:
    name = stand_in(
        "sim_ok",
        f"""
        (HERE / "argv.json").write_text(json.dumps(sys.argv[1:]))
        print("{RESOURCE}", flush=True)
        sys.stdin.read()  # --exit-with-stdin: leave when the parent closes our stdin
        (HERE / "clean-exit").write_text("yes")
        """,
    )
    with EmbeddedSimulator(module=name) as sim:
        assert sim.start({"seed": 3, "line_frequency": 50}) == RESOURCE
        assert sim.resource == RESOURCE
        process = sim._process
    assert process is not None and process.returncode == 0
    assert (tmp_path / name / "clean-exit").exists()
    argv = json.loads((tmp_path / name / "argv.json").read_text())
    assert argv[-4:] == ["--seed", "3", "--line-frequency", "50"]


def test_a_simulator_that_dies_is_reported_with_its_stderr(stand_in) -> None:
    name = stand_in("sim_dies", 'sys.stderr.write("no preset named huge\\n"); sys.exit(3)')
    with pytest.raises(InstrumentError, match="exited with code 3") as caught:
        EmbeddedSimulator(module=name).start({"preset": "huge"})
    assert "no preset named huge" in str(caught.value)
    assert f"-m {name} serve" in str(caught.value)  # how to run it by hand


def test_a_wrong_first_line_is_refused(stand_in) -> None:
    name = stand_in("sim_chatty", 'print("hello", flush=True); sys.stdin.read()')
    with pytest.raises(InstrumentError, match="printed 'hello' instead of its resource"):
        EmbeddedSimulator(module=name).start()


def test_a_silent_simulator_times_out_and_is_terminated(stand_in, monkeypatch) -> None:
    monkeypatch.setattr(embedded, "_STDIN_GRACE_S", 0.1)
    name = stand_in("sim_silent", "time.sleep(60)")  # ignores its stdin: must be terminated
    sim = EmbeddedSimulator(module=name, start_timeout_s=0.3)
    start = time.monotonic()
    with pytest.raises(InstrumentError, match=r"no resource string within 0\.3 s"):
        sim.start()
    assert time.monotonic() - start < 3.0
    assert sim._process is None  # stopped and forgotten
