"""`ccbench` loads only what the command that runs needs (docs/speed.md, "Start-up"): the
help lines named in main.COMMANDS are the modules' own, and a fresh process shows which
libraries a command loaded. No timing here (the machine is noisy): benchmarks/startup.py
measures the ratios."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.cli.main import COMMANDS, build_parser, named_command

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("numpy", "pandas", "pyarrow", "matplotlib", "pint", "scipy", "pyvisa", "yaml", "rich")


def _choices(parser):
    return parser._subparsers._group_actions[0].choices


def test_the_short_help_is_the_full_parsers_help():
    assert build_parser("").format_help() == build_parser(None).format_help()


@pytest.mark.parametrize("command", list(COMMANDS))
def test_a_named_command_gets_its_whole_parser(command):
    full = _choices(build_parser(None))[command].format_help()
    assert _choices(build_parser(command))[command].format_help() == full


def test_the_command_is_the_first_word_that_is_not_an_option():
    assert named_command(["--help"]) is None
    assert named_command(["report", "--text", "x"]) == "report"


def _loaded(*argv: str) -> list[str]:
    """The heavy libraries a fresh `ccbench ARGV` process had loaded when it ended."""
    probe = (
        "import atexit, json, sys\n"
        f"atexit.register(lambda: print(json.dumps([m for m in {HEAVY!r} if m in sys.modules]),"
        " file=sys.stderr))\n"
        "from sequencer.cli.main import entry\n"
        f"sys.argv = ['ccbench', *{list(argv)!r}]\n"
        "entry()\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", probe], cwd=ROOT, capture_output=True, text=True, timeout=120
    )
    return json.loads(done.stderr.strip().splitlines()[-1])


def test_help_loads_no_heavy_library():
    assert _loaded("--help") == []


def test_check_loads_neither_pandas_nor_pint_nor_pyvisa():
    loaded = _loaded("check", "recipes/demo.yaml")
    assert not {"pandas", "pyarrow", "matplotlib", "pint", "scipy", "pyvisa"} & set(loaded)
    assert "numpy" in loaded  # the probe sees what was loaded: the plan needs numpy
