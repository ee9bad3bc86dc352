"""The lot reports read the store in SQL and by device, not every point at once: their text
must stay what it was when the whole lot was loaded through pandas. The expected text in
golden/ was written by the code before that change, from the same seeded folders
(tests/report/conftest.py); set CCBENCH_WRITE_GOLDEN=1 to write it again on purpose."""

from __future__ import annotations

import io
import os
import re
from pathlib import Path

from rich.console import Console

from sequencer.cli.main import main
from sequencer.cli.reportcmd import after_run
from sequencer.recipe.load import load_recipe

GOLDEN = Path(__file__).parent / "golden"
# The report names the recipe's path (CI checks out elsewhere) and its digest (the demo recipe's
# own edits are not the report's): both are masked.
CHECKOUT = Path(__file__).resolve().parents[2]
RECIPE_DIGEST = load_recipe(CHECKOUT / "recipes" / "demo.yaml").digest
RECIPE_SHA = RECIPE_DIGEST[:16]


def _text(write) -> str:
    console = Console(file=io.StringIO(), width=100, highlight=False, color_system=None)
    write(console)
    return console.file.getvalue()


def _same(name: str, text: str, *folders: Path) -> None:
    for k, folder in enumerate(folders):  # the folders live in a new temporary place each run
        text = text.replace(str(folder), f"<folder {k}>")
    text = text.replace(str(CHECKOUT), "<checkout>")
    text = text.replace(RECIPE_SHA, "<recipe sha>")
    text = re.sub(r"[ \t]+\n", "\n", text)
    text = re.sub(r"written \d{4}-\d\d-\d\d \d\d:\d\d UTC", "written <time>", text)
    path = GOLDEN / name
    if os.environ.get("CCBENCH_WRITE_GOLDEN"):
        path.write_text(text, encoding="utf-8")
    assert text == path.read_text(encoding="utf-8")


def test_report_text_is_unchanged(lot_folder, retest_folder):
    argv = ["report", "--text", str(lot_folder), str(retest_folder), "--device", "FK2611-07-004"]
    text = _text(lambda console: main(argv, console))
    _same("report-text.txt", text, lot_folder, retest_folder)


def test_the_summary_after_a_run_is_unchanged(lot_folder, retest_folder):
    _same("after-run.txt", _text(lambda c: after_run(c, lot_folder)), lot_folder, retest_folder)


def test_the_html_page_and_the_stdf_file_are_unchanged(lot_folder, retest_folder, tmp_path):
    out, stdf = tmp_path / "report", tmp_path / "lot.stdf"
    argv = ["report", str(lot_folder), str(retest_folder), "--out", str(out)]
    assert main([*argv, "--device", "FK2611-07-004", "--stdf", str(stdf)], _quiet()) == 0
    _same(
        "report.html", (out / "report.html").read_text(encoding="utf-8"), lot_folder, retest_folder
    )
    written = stdf.read_bytes()
    for digest in (RECIPE_DIGEST, RECIPE_SHA):  # same length: the records keep their sizes
        written = written.replace(digest.encode(), b"0" * len(digest))
    if os.environ.get("CCBENCH_WRITE_GOLDEN"):
        (GOLDEN / "lot.stdf").write_bytes(written)
    assert written == (GOLDEN / "lot.stdf").read_bytes()


def _quiet() -> Console:
    return Console(file=io.StringIO(), width=100)
