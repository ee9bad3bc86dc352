"""`ccbench sim`: the simulated SMU served standalone over TCP, for a station file to name."""

from __future__ import annotations

import argparse
import os
import subprocess
import sys

from rich.console import Console

from sequencer.bench.signalgate import Terminated


def add_parser(sub: argparse._SubParsersAction) -> None:
    sim = sub.add_parser("sim", help="serve the simulated SMU standalone over TCP")
    sim.add_argument("--port", type=int, default=0)
    sim.add_argument("--seed", type=int, default=1)
    sim.add_argument("--devices", type=int, default=20)
    sim.add_argument("--preset", default="FLC-1.8")


def cmd_sim(args: argparse.Namespace, console: Console) -> int:
    console.print(
        "simulated SMU: no real output. Put the resource below in a station file "
        "(instrument.resource); Ctrl-C stops it."
    )
    command = [sys.executable, "-m", "simulator", "serve", "--port", str(args.port)]
    command += ["--seed", str(args.seed), "--devices", str(args.devices), "--preset", args.preset]
    child = subprocess.Popen(command, env=dict(os.environ))
    try:
        return child.wait()
    except (KeyboardInterrupt, Terminated):
        child.terminate()
        child.wait(timeout=10)
        return 0


COMMANDS = {"sim": cmd_sim}
