"""What the file formats (pydantic models) cost `ccbench check recipes/demo.yaml` at start-up.

One run of the command under `python -X importtime`; the import time of pydantic and of the
format models is set against the whole run's wall time, as a ratio measured in that one run.

    python benchmarks/format_import.py
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
COMMAND = [sys.executable, "-X", "importtime", "-m", "sequencer.cli", "check", "recipes/demo.yaml"]
# Top-level packages whose import is the formats' cost (pydantic imports pydantic_core itself).
FORMAT_PACKAGES = ("pydantic", "pydantic_core", "annotated_types", "typing_inspection")
FORMAT_MODULES = ("sequencer.recipe.format", "instruments.dialectformat")


def import_times(stderr: str) -> dict[str, int]:
    """Module -> its own import time in microseconds (importtime's 'self' column)."""
    out: dict[str, int] = {}
    for line in stderr.splitlines():
        if not line.startswith("import time:") or "self [us]" in line:
            continue
        own, _, name = (part.strip() for part in line.removeprefix("import time:").split("|"))
        out[name] = out.get(name, 0) + int(own)
    return out


def main() -> None:
    start = time.perf_counter()
    run = subprocess.run(COMMAND, cwd=ROOT, capture_output=True, text=True, check=True)
    wall_us = (time.perf_counter() - start) * 1e6
    times = import_times(run.stderr)
    every = sum(times.values())
    formats = sum(
        t
        for name, t in times.items()
        if name.split(".")[0] in FORMAT_PACKAGES or name.startswith(FORMAT_MODULES)
    )
    print(f"ccbench check recipes/demo.yaml: {wall_us / 1e3:.0f} ms wall, ", end="")
    print(f"{every / 1e3:.0f} ms in imports")
    print(f"pydantic and the format models: {formats / 1e3:.0f} ms")
    print(f"ratio to the whole run: {formats / wall_us:.3f}; to all imports: {formats / every:.3f}")


if __name__ == "__main__":
    main()
