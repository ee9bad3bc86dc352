"""`ccbench results --json`: the runs (and with --devices every device, with --by the yield
table) as one JSON document, from the rows the screen's tables are drawn from (cli.results).
Keys: jsonout; yields are fractions of 1, figures SI with the unit in the key (as stored)."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from sequencer.model.judgesettings import FIGURE_UNIT, FIGURES
from sequencer.store.yields import COUNTED, yield_by

if TYPE_CHECKING:  # pandas is imported when the command runs, not on every ccbench start
    import pandas as pd

    from sequencer.cli.runrows import RunRow

DEVICE_TEXT = ("device", "verdict", "bin_class", "soft_bin", "classification", "reasons")
DEVICE_NUMBERS = ("hard_bin", "channel")


def results_document(
    frame: pd.DataFrame, runs: list[RunRow], args: Any, source: str, written: Path | None
) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "source": source,
        "filter": {
            "lot": args.lot,
            "product": args.product,
            "since": args.since,
            "verdict": args.verdict,
            "dry_runs": bool(args.dry_runs),
        },
        "units": {"yield": "fraction of 1 (pass over pass + fail)"},
        "runs": [_run(r, show_yield=args.verdict is None) for r in runs],
        "devices_total": len(frame),
        "written": str(written) if written is not None else None,
    }
    if args.devices:
        doc["devices"] = [_device(row) for row in frame.to_dict("records")]
    if args.by:
        doc["yield_by"] = {"by": args.by, "rows": _yields(frame, args.by)}
        doc["units"]["yield_by"] = "fractions of 1; each part once, with its standing result"
    return doc


def _run(r: RunRow, *, show_yield: bool) -> dict[str, Any]:
    return {
        "folder": r.folder, "lot": r.lot, "started": r.started or None, "status": r.status,
        "devices": r.devices, "rounds": r.rounds, "verdicts": {"pass": r.passed, "fail": r.failed},
        "yield": r.judged_yield if show_yield else None,
    }  # fmt: skip


def _device(row: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {"folder": str(row.get("folder", "")), "lot": row.get("lot")}
    for key in DEVICE_TEXT:
        value = row.get(key)
        out[key] = None if value is None or value != value else str(value)
    for key in DEVICE_NUMBERS:
        value = row.get(key)
        out[key] = None if value is None or value != value else int(value)
    for figure in FIGURES:
        unit = FIGURE_UNIT[figure]
        for column in (f"{figure}_{unit}", f"{figure}_u_{unit}"):
            if column in row:
                out[column] = row[column]  # NaN becomes null in jsonout.clean
        if f"{figure}_at_least" in row:
            flag = row[f"{figure}_at_least"]
            out[f"{figure}_at_least"] = None if flag is None or flag != flag else bool(flag)
    number = row.get("round")  # the repetition number
    out["round"] = None if number is None or number != number else int(number)
    out["measured"] = row.get("measured")
    return out


def _yields(frame: pd.DataFrame, by: str) -> list[dict[str, Any]]:
    rows = []
    for values in yield_by(frame, by).to_dict("records"):
        rows.append(
            {
                "group": str(values[by]),
                "parts": int(values["parts"]),
                "tests": int(values["tests"]),
                "verdicts": {v: int(values[v]) for v in COUNTED},
                "retested": int(values["retested"]),
                "first_test_yield": float(values["first-test yield"]),
                "yield": float(values["yield"]),
            }
        )
    return rows
