"""`ccbench report` as a user types it, and the summary after a run."""

from __future__ import annotations

import io
import subprocess
import sys
from pathlib import Path

import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.cli.reportcmd import after_run

ROOT = Path(__file__).resolve().parents[2]


def run(argv: list[str], width: int = 160) -> tuple[int, str]:
    console = Console(file=io.StringIO(), width=width, highlight=False)
    code = main(argv, console=console)
    return code, console.file.getvalue()


def test_text_summary_has_yield_bins_worst_figures_and_capability(lot_folder):
    code, said = run(["report", str(lot_folder), "--text", "--device", "FK2611-07-016"])
    assert code == 0
    for title in ("Yield of FK2611-07", "Bins", "Figures closest to their limits", "Capability"):
        assert title in said
    assert "guard band" in said and "regulated current below min" in said
    assert "FK2611-07-016: fail, bin 5" in said and "1.62 mA – 1.98 mA" in said
    assert not (lot_folder / "report").exists()  # --text writes nothing


def test_text_summary_fits_an_80_column_terminal(lot_folder):
    code, said = run(["report", str(lot_folder), "--text"], width=80)
    assert code == 0 and max(len(line) for line in said.splitlines()) <= 80
    assert "FK2611-07-016" in said  # the worst device's name is not cut


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("extra", "code", "words"),
    [
        (["--device", "FK2611-07-999"], 2, "no device 'FK2611-07-999'"),
        (["SECOND"], 2, "name its folder with --out"),
        (["MISSING"], 5, "not a run folder"),
    ],
)
def test_mistakes_give_one_line_and_an_exit_code(lot_folder, tmp_path, extra, code, words):
    extra = [
        {"SECOND": str(lot_folder), "MISSING": str(tmp_path / "none")}.get(x, x) for x in extra
    ]
    got, said = run(["report", str(lot_folder), *extra])
    assert got == code
    assert said.startswith("ccbench: ") and words in said and "Traceback" not in said


def test_after_run_summary_and_its_failure_is_only_a_note(lot_folder, tmp_path):
    console = Console(file=io.StringIO(), width=120)
    after_run(console, lot_folder)
    said = console.file.getvalue()
    assert "Bins" in said and "Figures closest to their limits" in said
    console = Console(file=io.StringIO(), width=120)
    after_run(console, tmp_path / "gone")
    assert "lot summary not shown" in console.file.getvalue()


@pytest.mark.sim
def test_demo_run_then_every_report(tmp_path):
    """The README's tour: a real run on the simulator and its summary, then the reports."""
    out = tmp_path / "run"
    done = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "run", "recipes/demo.yaml", "--sim",
         "--out", str(out)],
        cwd=ROOT, capture_output=True, text=True, timeout=300,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "120", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip
    assert done.returncode == 0, done.stdout + done.stderr
    assert "Figures closest to their limits" in done.stdout and "Bins" in done.stdout
    stdf = out / "lot.stdf"
    code, said = run(["report", str(out), "--device", "FK2611-07-001", "--stdf", str(stdf)])
    assert code == 0, said
    assert (out / "report" / "report.html").is_file()
    assert (out / "report" / "device-FK2611-07-001.png").is_file()
    banner = "DRY RUN: every run measured the simulated instrument, not real parts"
    assert banner in (out / "report" / "report.html").read_text(encoding="utf-8")
    assert banner in run(["report", str(out), "--text"])[1]
    assert stdf.read_bytes()[:6] == bytes.fromhex("0200000a0204")
