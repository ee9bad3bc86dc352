"""The guides name files, modules and names of the code: each must exist, so the docs cannot
drift from the layout unnoticed. DEVELOPERS.md stays a guide one reads in ten minutes."""

import importlib
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
PAGES = [ROOT / "README.md", ROOT / "DEVELOPERS.md", *sorted((ROOT / "docs").glob("*.md"))]
PACKAGES = ("model", "judge", "recipe", "plan", "safety", "run", "store", "report", "bench", "cli")
TOP = ("sequencer", "instruments", "simulator", "tests", "benchmarks", "recipes", "docs")
PATH = re.compile(r"(?<![\w./-])((?:[\w-]+/)+[\w-]+\.(?:py|yaml|md))\b")
DOTTED = re.compile(r"`((?:" + "|".join(PACKAGES) + r")(?:\.\w+)+)`")
# Not modules: a file of the run folder and a column of the `run` table.
NOT_MODULES = {"run.lock", "run.uid"}
LINK = re.compile(r"\]\(([^)#\s]+)[^)]*\)")


def code_paths(text: str) -> list[str]:
    """Paths like `store/journal.py` or `tests/support/pgserver.py` that a page names."""
    return [p for p in PATH.findall(text) if not p.startswith(("http", "runs/", "/"))]


def resolves(path: str) -> bool:
    bases = [ROOT, ROOT / "sequencer"]
    return any((base / path).exists() for base in bases)


def dotted_resolves(name: str) -> bool:
    """`judge.decide.IS_FAILING`: the longest module under sequencer/ that imports, then names."""
    parts = name.split(".")
    for cut in range(len(parts), 0, -1):
        try:
            obj = importlib.import_module("sequencer." + ".".join(parts[:cut]))
        except ModuleNotFoundError:
            continue
        for attr in parts[cut:]:
            attr = attr.removesuffix("()")
            if not hasattr(obj, attr):
                return False
            obj = getattr(obj, attr)
        return True
    return False


@pytest.mark.parametrize("page", PAGES, ids=lambda p: p.name)
def test_every_file_a_page_names_exists(page):
    text = page.read_text(encoding="utf-8")
    missing = [p for p in code_paths(text) if p.split("/")[0] in TOP + PACKAGES and not resolves(p)]
    assert missing == []


@pytest.mark.parametrize("page", PAGES, ids=lambda p: p.name)
def test_every_module_name_a_page_gives_imports(page):
    text = page.read_text(encoding="utf-8")
    named = [n for n in DOTTED.findall(text) if n not in NOT_MODULES]
    assert [n for n in named if not dotted_resolves(n)] == []


@pytest.mark.parametrize("page", PAGES, ids=lambda p: p.name)
def test_every_link_leads_somewhere(page):
    text = page.read_text(encoding="utf-8")
    links = [t for t in LINK.findall(text) if "://" not in t]
    assert [t for t in links if not (page.parent / t).exists()] == []


def test_the_contributor_guide_is_short():
    # The guide is read in ten minutes; reference material belongs in docs/.
    assert (ROOT / "DEVELOPERS.md").stat().st_size <= 12 * 1024


def test_a_wrong_name_is_caught():
    assert code_paths("see `store/nowhere.py` and judge/engine.py") == [
        "store/nowhere.py",
        "judge/engine.py",
    ]
    assert not resolves("store/nowhere.py") and resolves("judge/engine.py")
    assert dotted_resolves("judge.decide.IS_FAILING")
    assert not dotted_resolves("judge.decide.NO_SUCH_NAME")
    assert not dotted_resolves("judge.nomodule")
