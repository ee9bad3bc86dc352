"""`ccbench check` as a user runs it: a real process, its exit code and its one line."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def ccbench(*args: str, cwd: Path = ROOT) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sequencer.cli", *args],
        cwd=cwd, capture_output=True, text=True, timeout=60,
        env={"PATH": "/usr/bin:/bin", "COLUMNS": "200", "PYTHONPATH": str(ROOT)},
    )  # fmt: skip


def test_check_demo_prints_the_plan():
    done = ccbench("check", "recipes/demo.yaml")
    assert done.returncode == 0, done.stdout + done.stderr
    assert "20 devices x 86 points" in done.stdout
    assert "peak 40 V" in done.stdout


@pytest.mark.robustness
def test_check_broken_recipe_gives_one_line_and_exit_2(tmp_path):
    (tmp_path / "demo-station.yaml").write_text((ROOT / "recipes/demo-station.yaml").read_text())
    text = (ROOT / "recipes/demo.yaml").read_text().replace("compliance: 5 mA", "compliance: 5", 1)
    (tmp_path / "broken.yaml").write_text(text)
    done = ccbench("check", str(tmp_path / "broken.yaml"))
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()  # errors: stderr when stdout is not a terminal
    assert len(lines) == 1 and not done.stdout, done.stdout + done.stderr
    line = text.splitlines().index("      compliance: 5") + 1
    assert lines[0].startswith(
        f"ccbench: {tmp_path / 'broken.yaml'}:{line}: steps[0].sweep.compliance"
    )
    assert "needs a unit" in lines[0]
    assert "Traceback" not in done.stderr


@pytest.mark.robustness
def test_over_limit_recipe_is_refused_before_any_instrument(tmp_path):
    (tmp_path / "demo-station.yaml").write_text((ROOT / "recipes/demo-station.yaml").read_text())
    text = (ROOT / "recipes/demo.yaml").read_text().replace("stop: 40 V", "stop: 75 V")
    (tmp_path / "hot.yaml").write_text(text)
    # A resource nobody listens on: if anything tried to connect, the error would differ.
    done = ccbench("run", str(tmp_path / "hot.yaml"), "--out", str(tmp_path / "out"))
    assert done.returncode == 3
    assert "step 'iv' reaches 75 V, above the station's maximum 60 V" in done.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("written", "problem"),
    [
        ("'%%%not::a::resource'", "is not a VISA resource string (unknown interface type)"),
        ("''", "is empty"),
        ("12345", "is not text"),
        ("'12345'", "is not a VISA resource string"),
        ("'TCPIP0::300.1.1.1::5025::SOCKET'", "has the host '300.1.1.1', which is not an IPv4"),
        ("'TCPIP0::192.0.2.17::70000::SOCKET'", "has the port '70000'"),
    ],
)
def test_check_refuses_a_resource_that_cannot_name_an_instrument(tmp_path, written, problem):
    station = (ROOT / "recipes/demo-station.yaml").read_text()
    assert "\n  resource: sim\n" in station
    (tmp_path / "demo-station.yaml").write_text(
        station.replace("\n  resource: sim\n", f"\n  resource: {written}\n", 1)
    )
    (tmp_path / "demo.yaml").write_text((ROOT / "recipes/demo.yaml").read_text())
    done = ccbench("check", str(tmp_path / "demo.yaml"))
    lines = done.stderr.strip().splitlines()
    assert done.returncode == 2 and len(lines) == 1 and not done.stdout, done.stdout + done.stderr
    line = station.splitlines().index("  resource: sim") + 1
    where = f"ccbench: {tmp_path / 'demo-station.yaml'}:{line}: instrument.resource {problem}"
    assert lines[0].startswith(where), lines[0]
    assert "or sim for the simulator" in lines[0]


def _variant(tmp_path: Path, old: str, new: str) -> Path:
    (tmp_path / "demo-station.yaml").write_text((ROOT / "recipes/demo-station.yaml").read_text())
    text = (ROOT / "recipes/demo.yaml").read_text()
    assert old in text
    (tmp_path / "variant.yaml").write_text(text.replace(old, new, 1))
    return tmp_path / "variant.yaml"


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("old", "new", "field"),
    [
        ("test_voltage: 25 V", "test_voltage: 45 V", "judge.test_voltage"),
        ("knee_voltage: 6 V", "knee_voltage: 41 V", "judge.knee_voltage"),
        ("peak_voltage: 40 V", "peak_voltage: 37.3 V", "judge.peak_voltage"),
    ],
)
def test_check_refuses_a_figure_voltage_the_plan_does_not_measure(tmp_path, old, new, field):
    # Every device would fail for a missing figure: refused before anything runs.
    path = _variant(tmp_path, old, new)
    done = ccbench("check", str(path))
    assert done.returncode == 2 and not done.stdout, done.stdout + done.stderr
    (line,) = done.stderr.strip().splitlines()
    assert line.startswith(f"ccbench: {path}: {field} "), line
    assert "not measured" in line or "no programmed level" in line, line


def test_check_warns_when_compliance_is_at_or_below_a_current_limit(tmp_path):
    path = _variant(tmp_path, "compliance: 5 mA", "compliance: 1.9 mA")
    done = ccbench("check", str(path))
    assert done.returncode == 0, done.stdout
    assert "warning" in done.stdout and "step 'iv'" in done.stdout.replace("\n", " ")
    assert "devices will clamp" in done.stdout.replace("\n", " ")


@pytest.mark.robustness
def test_run_refuses_the_same_plan_before_any_instrument(tmp_path):
    # `run` applies check's rule too: no simulator started, no run folder made.
    path = _variant(tmp_path, "test_voltage: 25 V", "test_voltage: 45 V")
    out = tmp_path / "run"
    done = ccbench("run", str(path), "--sim", "--out", str(out))
    assert done.returncode == 2, done.stdout
    assert done.stderr.strip().splitlines()[-1].startswith(f"ccbench: {path}: judge.test_voltage")
    assert not out.exists()
