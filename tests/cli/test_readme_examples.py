"""The README's tour shows a recipe and an error: both must be what the shipped files give, so a
reader who copies them meets what the README promised."""

import re
import subprocess
import sys
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def blocks(kind: str) -> list[str]:
    """The fenced blocks of one kind ("" for plain), fences told apart by their order."""
    found, current, lang = [], None, ""
    for line in README.splitlines():
        fence = re.match(r"\s*```(\w*)$", line)
        if fence and current is None:
            current, lang = [], fence.group(1)
        elif fence:
            if lang == kind:
                found.append("\n".join(current) + "\n")
            current = None
        elif current is not None:
            current.append(line.strip() if kind == "" else line)
    return found


def contained(part, whole) -> bool:
    """Every key and value the snippet shows is in the file (the snippet may leave things out)."""
    if isinstance(part, dict):
        return isinstance(whole, dict) and all(
            k in whole and contained(v, whole[k]) for k, v in part.items()
        )
    if isinstance(part, list):  # an excerpt: the items shown, in the file's order
        rest = iter(whole) if isinstance(whole, list) else iter(())
        return all(any(contained(p, w) for w in rest) for p in part)
    return part == whole


def test_the_tour_recipe_is_the_demo_file():
    snippet = next(b for b in blocks("yaml") if b.startswith("product:"))
    demo = yaml.safe_load((ROOT / "recipes" / "demo.yaml").read_text(encoding="utf-8"))
    assert contained(yaml.safe_load(snippet), demo)


def test_containment_notices_a_changed_value():
    assert contained({"a": [{"b": 1}]}, {"a": [{"b": 1, "c": 2}], "d": 3})
    assert not contained({"a": [{"b": 2}]}, {"a": [{"b": 1}]})
    assert contained([1, 3], [1, 2, 3]) and not contained([3, 1], [1, 2, 3])


def test_the_error_example_is_what_check_says():
    shown = next(b for b in blocks("") if b.startswith("ccbench: recipes/")).strip()
    path = shown.split(":")[1].strip()
    assert (ROOT / path).exists(), f"the README's example names {path}, which is not shipped"
    run = subprocess.run(
        [sys.executable, "-m", "sequencer.cli", "check", path],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert run.returncode == 2
    assert (run.stdout + run.stderr).strip().splitlines()[-1] == shown
