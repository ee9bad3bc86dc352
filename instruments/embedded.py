"""Run the simulator as a separate program on 127.0.0.1, for 'sim' resources.

The simulator stays behind the wire: it is started as `python -m simulator serve`, never imported,
and everything the driver learns from it comes through SCPI over TCP. With --exit-with-stdin it
dies with us even after a SIGKILL, because its stdin then reaches end of file.
"""

from __future__ import annotations

import contextlib
import os
import queue
import re
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Mapping
from pathlib import Path
from types import TracebackType
from typing import IO

from instruments.errors import InstrumentError

OPTION_NAMES = frozenset(
    {"seed", "devices", "preset", "spread", "defect_rate", "clock", "line_frequency", "faults"}
    | {"temperature", "thermal_resistance", "thermal_time"}
    | {"reading_gain", "range_offset", "contact_spread", "noise_seed"}
)
# The simulated chamber's options (`python -m simulator chamber`); faults are names there.
CHAMBER_OPTION_NAMES = frozenset(
    {"room", "tau_air", "tau_mount", "reach", "speed", "lowest", "highest", "faults"}
)
START_TIMEOUT_S = 20.0
_RESOURCE_LINE = re.compile(r"TCPIP0::127\.0\.0\.1::\d+::SOCKET")
_PROJECT_ROOT = Path(__file__).resolve().parent.parent
_STDIN_GRACE_S = 2.0  # time to exit on its own after stdin closes, before it is terminated
_STDERR_TAIL = 1500  # characters of the simulator's stderr quoted when it fails to start


class EmbeddedSimulator:
    """The simulator as a child process. Use as a context manager, or `start()` then `stop()`."""

    def __init__(
        self,
        *,
        start_timeout_s: float = START_TIMEOUT_S,
        module: str = "simulator",
        program: str = "serve",
    ) -> None:
        self.start_timeout_s = start_timeout_s
        self.module = module  # another program with the same command line (tests use one)
        self.program = program  # "serve": the SMU; "chamber": the temperature chamber
        self.resource: str | None = None
        self._process: subprocess.Popen[str] | None = None
        self._stderr: IO[str] | None = None

    def __enter__(self) -> EmbeddedSimulator:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()

    def start(self, options: Mapping[str, object] | None = None) -> str:
        """Launch the simulator and return its resource string once it listens."""
        if self._process is not None:
            raise InstrumentError("sim", None, "the simulator is running already", hint="stop it")
        if self.program == "chamber":
            command = chamber_command(options or {}, module=self.module)
        else:
            command = simulator_command(options or {}, module=self.module)
        # A file, not a pipe: a chatty simulator never blocks, and the tail is there to quote.
        self._stderr = tempfile.TemporaryFile(  # noqa: SIM115 - lives as long as the child
            mode="w+", encoding="utf-8", errors="replace"
        )
        self._process = subprocess.Popen(
            command,
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=self._stderr,
            text=True,
            env=_child_env(),
            # Out of the terminal's process group: a Ctrl-C there is for ccbench, which must
            # still reach the instrument to switch its output off and read it back. The child
            # ends when ccbench closes its stdin, or exits in any way (--exit-with-stdin).
            start_new_session=True,
        )
        try:
            self.resource = self._await_resource(command)
        except BaseException:
            self.stop()
            raise
        return self.resource

    def stop(self) -> None:
        """Close its stdin (it exits on EOF), then terminate, wait, and kill if it must."""
        process, self._process = self._process, None
        if process is not None:
            _end(process)
        if self._stderr is not None:
            self._stderr.close()
            self._stderr = None
        self.resource = None

    def _await_resource(self, command: list[str]) -> str:
        assert self._process is not None and self._process.stdout is not None
        lines = _first_line_reader(self._process.stdout)
        deadline = time.monotonic() + self.start_timeout_s
        while time.monotonic() < deadline:
            try:
                line = lines.get(timeout=0.05).strip()
            except queue.Empty:
                if self._process.poll() is not None:
                    code = self._process.returncode
                    raise self._failure(command, f"exited with code {code}") from None
                continue
            if _RESOURCE_LINE.fullmatch(line):
                return line
            raise self._failure(command, f"printed {line!r} instead of its resource string")
        raise self._failure(command, f"printed no resource string within {self.start_timeout_s} s")

    def _failure(self, command: list[str], what: str) -> InstrumentError:
        tail = self._stderr_tail()
        detail = f"the simulator {what}" + (f"; its stderr ends: {tail}" if tail else "")
        hint = f"run it by hand to see why: {' '.join(command[1:])}"
        return InstrumentError("sim", None, detail, hint=hint)

    def _stderr_tail(self) -> str:
        if self._stderr is None:
            return ""
        self._stderr.seek(0)
        return self._stderr.read()[-_STDERR_TAIL:].strip()


def simulator_command(options: Mapping[str, object], *, module: str = "simulator") -> list[str]:
    """The command line for these options (keys as in OPTION_NAMES, values as text)."""
    command = [sys.executable, "-m", module, "serve", "--port", "0", "--exit-with-stdin"]
    for key, value in options.items():
        if key not in OPTION_NAMES:
            known = ", ".join(sorted(OPTION_NAMES))
            hint = f"use one of: {known}"
            raise InstrumentError("sim", None, f"unknown simulator option {key!r}", hint=hint)
        if key == "faults":
            command += [arg for item in _fault_list(value) for arg in ("--fault", item)]
        else:
            command += [f"--{key.replace('_', '-')}", str(value)]
    return command


def chamber_command(options: Mapping[str, object], *, module: str = "simulator") -> list[str]:
    """The simulated chamber's command line (keys as in CHAMBER_OPTION_NAMES)."""
    command = [sys.executable, "-m", module, "chamber", "--port", "0", "--exit-with-stdin"]
    for key, value in options.items():
        if key not in CHAMBER_OPTION_NAMES:
            hint = f"use one of: {', '.join(sorted(CHAMBER_OPTION_NAMES))}"
            raise InstrumentError("sim", None, f"unknown chamber option {key!r}", hint=hint)
        if key == "faults":
            names = value if isinstance(value, list | tuple) else [value]
            command += [arg for name in names for arg in ("--fault", str(name))]
        else:
            command += [f"--{key.replace('_', '-')}", str(value)]
    return command


def _fault_list(value: object) -> list[str]:
    """Each fault of a station's `simulator: faults:` list in the `--fault` text form."""
    items = value if isinstance(value, list | tuple) else [value]
    return [item if isinstance(item, str) else _fault_text(item) for item in items]


def _fault_text(item: object) -> str:
    if not isinstance(item, Mapping) or "kind" not in item:
        detail = f"a fault must be a mapping with a 'kind', or text (got {item!r})"
        raise InstrumentError("sim", None, detail, hint="see the fault keys in DEVELOPERS.md")
    pairs = [f"{key}={val}" for key, val in item.items() if key != "kind"]
    if any("," in pair for pair in pairs):
        detail = f"a fault value may not contain ',' (got {item!r})"
        raise InstrumentError("sim", None, detail, hint="join alternative headers with '|'")
    return f"{item['kind']}" + (":" + ",".join(pairs) if pairs else "")


def _child_env() -> dict[str, str]:
    # The project is not necessarily installed: let the child find `simulator` beside us.
    env = dict(os.environ)
    parts = [str(_PROJECT_ROOT), *filter(None, env.get("PYTHONPATH", "").split(os.pathsep))]
    env["PYTHONPATH"] = os.pathsep.join(parts)
    return env


def _first_line_reader(stream: IO[str]) -> queue.Queue[str]:
    """Hand over the first stdout line, then keep draining so a chatty child never blocks."""
    lines: queue.Queue[str] = queue.Queue()

    def pump() -> None:
        try:
            with stream:  # closed here, by the only reader, once the child has exited
                first = stream.readline()
                if first:
                    lines.put(first)
                for _ in stream:
                    pass
        except (OSError, ValueError):
            pass  # the pipe broke: nothing left to hand over

    threading.Thread(target=pump, name="simulator-stdout", daemon=True).start()
    return lines


def _end(process: subprocess.Popen[str]) -> None:
    if process.stdin is not None:
        with contextlib.suppress(OSError):  # it may be gone already
            process.stdin.close()
    for stop, wait_s in ((None, _STDIN_GRACE_S), (process.terminate, 3.0), (process.kill, 5.0)):
        if stop is not None:
            stop()
        try:
            process.wait(timeout=wait_s)
            break
        except subprocess.TimeoutExpired:
            continue
