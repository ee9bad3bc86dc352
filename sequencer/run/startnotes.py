"""What the start of a session found out about the instrument, for the screen and the run record:
the error entries left from before the session (reported, never raised) and how a clamped reading
is told apart, for single and for list readings (a status bit, or the clamp-fraction rule)."""

from __future__ import annotations

from typing import Any

from instruments import ScpiSmu


def instrument_record(smu: ScpiSmu) -> dict[str, Any]:
    """The facts the run record keeps for one instrument."""
    return {
        "dialect": smu.dialect.name,
        "compliance": smu.dialect.compliance_rules(),
        "errors_at_start": [[code, text] for code, text in smu.stale_errors],
    }


def instrument_notes(smu: ScpiSmu) -> list[str]:
    """Lines for the screen: stale errors found at start and a clamp-fraction rule in use."""
    lines = []
    if smu.stale_errors:
        found = "; ".join(f"{code}, {text}" for code, text in smu.stale_errors)
        lines.append(
            f"{smu.resource}: the error queue held entries from before this session (cleared, "
            f"not this run's): {found}"
        )
    rules = smu.dialect.compliance_rules()
    for kind in ("single", "list"):
        if rules[kind].startswith("clamp fraction"):
            lines.append(
                f"{smu.resource}: {kind} readings have no compliance status bit in dialect "
                f"{smu.dialect.name}; a reading counts as clamped by the {rules[kind]}"
            )
    return lines
