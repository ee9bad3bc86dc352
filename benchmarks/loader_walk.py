"""The walk of one `load_recipe('recipes/demo.yaml')` through the project's modules.

Every call of a project function (sequencer.*, instruments.*) is recorded with sys.setprofile,
on a second load (the first one imports the modules and fills the unit registry, so the walk
is the loader's own). Printed: the modules touched, the calls, and the climbs back: how often
the walk enters a module it had already left (A -> B -> A counts one).

    python benchmarks/loader_walk.py            # this checkout
    PYTHONPATH=/tmp/old python benchmarks/loader_walk.py   # another tree, for a before/after
"""

from __future__ import annotations

import sys
from collections import Counter
from pathlib import Path
from typing import Any

PROJECT = ("sequencer", "instruments")


def walk(path: Path) -> list[str]:
    from sequencer.recipe.load import load_recipe

    load_recipe(path)
    modules: list[str] = []

    def profile(frame: Any, event: str, arg: Any) -> None:
        if event != "call":
            return
        name = frame.f_globals.get("__name__", "")
        if name.split(".")[0] in PROJECT and (not modules or modules[-1] != name):
            modules.append(name)

    sys.setprofile(profile)
    try:
        load_recipe(path)
    finally:
        sys.setprofile(None)
    return modules


def climbs_back(modules: list[str]) -> int:
    seen: set[str] = set()
    count = 0
    for index, name in enumerate(modules):
        if name in seen and modules[index - 1] != name:
            count += 1
        seen.add(name)
    return count


def main() -> None:
    import sequencer

    recipe = Path(__file__).resolve().parents[1] / "recipes" / "demo.yaml"
    modules = walk(recipe)
    touched = Counter(modules)
    print(f"tree: {Path(sequencer.__file__).parent.parent}")
    print(f"modules touched: {len(touched)}; module changes: {len(modules) - 1}; "
          f"climbs back to a module left before: {climbs_back(modules)}")  # fmt: skip
    for name, entries in sorted(touched.items()):
        print(f"  {name}: entered {entries} time(s)")


if __name__ == "__main__":
    main()
