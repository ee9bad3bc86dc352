"""The layout keeps the flow: every import read from the code itself (at any depth, type-only
imports included) must point down the layers, libraries stay in their rooms, and no two modules
import each other round a circle. A planted wrong-way import makes each check fail (tested here
too, on a copy of the import graph)."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
PACKAGES = ("sequencer", "instruments", "simulator")

# Bottom first. A module may import its own layer and the layers below it, never one above.
LAYERS = (
    "model",
    "judge",
    "study",
    "recipe",
    "plan",
    "safety",
    "run",
    "store",
    "report",
    "bench",
    "cli",
)

# Libraries that belong to one room each: (top-level import name, modules allowed to import it).
ROOMS = {
    "yaml": ("sequencer.recipe.yamlsource", "simulator.", "instruments.dialect"),
    "rich": ("sequencer.cli.",),
    "argparse": ("sequencer.cli.", "simulator.__main__"),
    "pyvisa": ("instruments.transport",),
    "pyvisa_py": ("instruments.transport",),
    "sqlite3": ("sequencer.store.", "sequencer.report.data"),
    "psycopg": ("sequencer.store.shared.",),
    "simulator": ("simulator.", "instruments.embedded"),
    "pint": ("sequencer.recipe.units",),
    # The file formats are described once, as pydantic models, beside their loaders.
    "pydantic": ("sequencer.recipe.", "instruments.dialectformat"),
    "pydantic_core": ("sequencer.recipe.", "instruments.dialectformat"),
}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imports_of(path: Path) -> set[str]:
    """Every module this file imports, resolved to dotted names (relative ones included)."""
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found |= {alias.name for alias in node.names}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                stem = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join([*stem, base] if base else stem)
            found.add(base)
            found |= {f"{base}.{alias.name}" for alias in node.names}
    return found


def graph() -> dict[str, set[str]]:
    """Module -> the project modules and outside libraries it imports."""
    files = [p for pkg in PACKAGES for p in (ROOT / pkg).rglob("*.py")]
    known = {module_name(p) for p in files}
    edges: dict[str, set[str]] = {}
    for path in files:
        targets = set()
        for imported in imports_of(path):
            if imported.split(".")[0] in PACKAGES:
                while imported and imported not in known:  # `from pkg import name`: the module
                    imported = imported.rpartition(".")[0]
                if imported:
                    targets.add(imported)
            else:
                targets.add(imported.split(".")[0])
        edges[module_name(path)] = targets - {module_name(path)}
    return edges


def layer(module: str) -> int | None:
    parts = module.split(".")
    if parts[0] != "sequencer" or len(parts) < 2 or parts[1] not in LAYERS:
        return None
    return LAYERS.index(parts[1])


def upward(edges: dict[str, set[str]]) -> list[str]:
    wrong = []
    for module, targets in edges.items():
        here = layer(module)
        for target in targets:
            there = layer(target)
            if here is not None and there is not None and there > here:
                above = f"layer {LAYERS[there]} is above {LAYERS[here]}"
                wrong.append(f"{module} imports {target} ({above})")
    return sorted(wrong)


def out_of_room(edges: dict[str, set[str]]) -> list[str]:
    wrong = []
    for module, targets in edges.items():
        for library, allowed in ROOMS.items():
            if library in targets or any(t.split(".")[0] == library for t in targets):
                if module.split(".")[0] == library:
                    continue
                if not any(_within(module, a) for a in allowed):
                    wrong.append(f"{module} imports {library} (only {', '.join(allowed)} may)")
    return sorted(wrong)


def _within(module: str, allowed: str) -> bool:
    """`allowed` names a module, or (ending in a dot) every module below a package."""
    return module == allowed or (allowed.endswith(".") and module.startswith(allowed))


def circles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected groups of more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in edges.get(v, ()):
            if w not in edges:
                continue
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            group = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                group.append(w)
                if w == v:
                    break
            if len(group) > 1:
                found.append(sorted(group))

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return found


def package_faces(edges: dict[str, set[str]]) -> dict[str, set[str]]:
    """The graph without each package's own `__init__` re-exports (a package's face imports its
    modules; a module importing the face is what would close a circle, and that is kept)."""
    return {m: {t for t in ts if not m.startswith(t + ".")} for m, ts in edges.items()}


EDGES = graph()


def test_every_import_points_down_the_layers():
    assert upward(EDGES) == []


def test_libraries_stay_in_their_rooms():
    assert out_of_room(EDGES) == []


def test_no_module_imports_itself_round_a_circle():
    assert circles(package_faces(EDGES)) == []


def test_every_sequencer_module_is_in_a_layer():
    loose = [m for m in EDGES if m.startswith("sequencer.") and layer(m) is None]
    assert loose == []


@pytest.mark.parametrize(
    ("planted", "check"),
    [
        (("sequencer.model.curve", "sequencer.cli.main"), upward),
        (("sequencer.judge.figures", "rich"), out_of_room),
        (("sequencer.plan.make", "yaml"), out_of_room),
        (("sequencer.run.device", "pyvisa"), out_of_room),
        (("sequencer.report.plots", "psycopg"), out_of_room),
        (("sequencer.bench.lotrun", "simulator"), out_of_room),
        (("sequencer.plan.make", "pydantic"), out_of_room),
    ],
)
def test_a_planted_wrong_way_import_is_caught(planted, check):
    module, target = planted
    edges = {m: set(t) for m, t in EDGES.items()}
    edges[module].add(target)
    assert any(module in line for line in check(edges))


def test_a_planted_circle_is_caught():
    edges = {m: set(t) for m, t in EDGES.items()}
    edges["sequencer.model.errors"].add("sequencer.model.curve")
    edges["sequencer.model.curve"].add("sequencer.model.errors")
    assert ["sequencer.model.curve", "sequencer.model.errors"] in circles(edges)


def late_imports_without_reason(name: str, text: str) -> list[str]:
    """Imports inside a function that do not say, on their line or the one above, that they wait
    for start-up speed. A late import is never a way round a circle (move the type down)."""
    lines = text.splitlines()
    found = []
    for fn in ast.walk(ast.parse("\n".join(lines))):
        if not isinstance(fn, ast.FunctionDef | ast.AsyncFunctionDef):
            continue
        for node in ast.walk(fn):
            if isinstance(node, ast.Import | ast.ImportFrom):
                top = node.lineno - 1
                while top > 0 and lines[top - 1].strip().startswith(("import ", "from ")):
                    top -= 1  # a block of late imports shares the one comment above it
                said = " ".join(lines[max(top - 1, 0) : node.end_lineno]).lower()
                if "start-up speed" not in said:
                    found.append(f"{name}:{node.lineno}")
    return found


def test_every_late_import_says_it_is_for_start_up_speed():
    files = [p for pkg in PACKAGES for p in (ROOT / pkg).rglob("*.py")]
    late = [
        where
        for p in files
        for where in late_imports_without_reason(module_name(p), p.read_text(encoding="utf-8"))
    ]
    assert late == []


def test_a_late_import_without_its_reason_is_caught():
    bare = "def f():\n    import json\n    return json\n"
    said = "def f():\n    import json  # start-up speed\n    return json\n"
    assert late_imports_without_reason("planted", bare) == ["planted:2"]
    assert late_imports_without_reason("planted", said) == []
    block = "def f():\n    # start-up speed\n    import json\n    import csv\n    return json\n"
    assert late_imports_without_reason("planted", block) == []
