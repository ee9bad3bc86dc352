"""`ccbench status RUN_DIR`: how a run stands, from any terminal, while it runs or after.

Read only (store.runstatus): the lock is never taken, so looking at a run can never refuse,
slow or change it. It says whether the run is still going (its lock held by a live process),
its progress (devices of the round over the tray, and of the run), passes and fails so far,
how the output was last recorded, how each session ended, and when it should end: the plan's
estimate per device until two devices of this session are stored, then the pace measured so
far.
"""

from __future__ import annotations

import argparse
import datetime as dt
from pathlib import Path
from typing import Any

from rich.console import Console

from sequencer.cli import jsonout
from sequencer.plan.segments import Plan
from sequencer.recipe.repeat import Repeat
from sequencer.run.estimate import Estimate
from sequencer.store.runstatus import RunStatus, look


def add_parser(sub: argparse._SubParsersAction) -> None:
    status = sub.add_parser("status", help="how a run stands: progress, output, ending, ETA")
    status.add_argument("run_dir", type=Path, metavar="RUN_DIR")
    status.add_argument("--json", action="store_true", help=jsonout.FLAG_HELP)


def planned(
    plan: Plan, estimate: Estimate | None, repeat: Repeat | None, part_by_part: bool
) -> dict[str, Any]:
    """What the run manifest keeps of the plan for `status`: devices per round over the tray
    (the repetition the recipe's `repeat:` schedules), the estimate per device, the
    schedule (None: one round; part by part: no fixed count)."""
    per_device = estimate.per_device_s if estimate else plan.seconds_per_device()
    return {
        "devices_per_round": None if part_by_part else len(plan.channels),
        "seconds_per_device": per_device,
        "schedule": None if repeat is None else _schedule(repeat),
    }


def _schedule(repeat: Repeat) -> dict[str, Any]:
    return {"every_s": repeat.every_s, "for_s": repeat.for_s, "rounds": repeat.rounds}


def cmd_status(args: argparse.Namespace, console: Console) -> int:
    status = look(args.run_dir)
    facts = describe(status, dt.datetime.now(dt.UTC))
    if args.json:
        jsonout.write(console, "status", facts)
        return 0
    for line in lines(facts):
        console.print(line, soft_wrap=True, highlight=False, markup=False)
    return 0


def describe(status: RunStatus, now: dt.datetime) -> dict[str, Any]:
    """The facts `status` shows, as plain data (the screen and --json say the same)."""
    m, t, h = status.manifest, status.tally, status.holder
    session = status.last_session
    plan = m.get("planned") if isinstance(m.get("planned"), dict) else {}
    per_round = plan.get("devices_per_round")
    return {
        "folder": str(status.folder),
        "lot": m.get("lot"),
        "product": m.get("product"),
        "dry_run": bool(m.get("dry_run")),
        "state": _state(status),
        "holder": {
            "pid": h.pid,
            "host": h.host or None,
            "since": h.since or None,
            "alive": h.alive,
        },
        "session": session.get("session"),
        "sessions": len(status.sessions),
        "round": t.last_round,
        "devices_per_round": per_round,
        "done_in_round": t.done_in_last_round,
        "stored": t.stored,
        "verdicts": t.verdicts,
        "output": _output(status),
        "ended": [s.get("ended") for s in status.sessions],
        "schedule": m.get("schedule"),
        "eta": _eta(status, plan, now),
    }


def _state(status: RunStatus) -> str:
    """running, ended (with its status word), stopped without a record, or unknown."""
    recorded = str(status.manifest.get("status") or "")
    if status.holder.alive is None:
        return f"unknown: the lock is held on {status.holder.host}; look from there"
    if status.running:
        return "running"
    if recorded == "running":  # nobody holds the lock, yet no session recorded its end
        return "stopped without recording its end (killed, or a power cut)"
    return recorded or "unknown"


def _output(status: RunStatus) -> str:
    if status.running:
        return "on while a device is measured, off between devices"
    ended = status.last_session.get("ended")
    if ended:
        return str(ended)
    return (
        "NOT RECORDED: the run stopped without saying how it left the output; check the "
        "instrument (switch it off there), then `ccbench run ... --resume` continues"
    )


def _eta(status: RunStatus, plan: dict[str, Any], now: dt.datetime) -> dict[str, Any] | None:
    """When the run should end, and on what basis; None once it has ended or cannot say."""
    if not status.running or not plan:
        return None
    t = status.tally
    pace, basis = _pace(status, plan)
    schedule = plan.get("schedule") or {}
    per_round = plan.get("devices_per_round")
    if per_round is None:
        return {"at": None, "basis": "part by part: ends when the operator quits", "pace_s": pace}
    left_in_round = max(int(per_round) - t.done_in_last_round, 0)
    rounds, every, lasting = schedule.get("rounds"), schedule.get("every_s"), schedule.get("for_s")
    if schedule and rounds is None and lasting is None:
        return {"at": None, "basis": "repeats until stopped", "pace_s": pace}
    seconds = left_in_round * pace
    if rounds is not None:
        round_s = max(float(every or 0), int(per_round) * pace)
        seconds += max(int(rounds) - t.last_round, 0) * round_s
    at = now + dt.timedelta(seconds=seconds)
    if lasting is not None:
        end = _parse(status.manifest.get("started")) + dt.timedelta(seconds=float(lasting))
        at = min(at, end) if rounds is not None else max(end, now)
        basis += f"; the schedule ends the run {float(lasting) / 3600:g} h after its start"
    return {"at": at.isoformat(timespec="seconds"), "seconds": (at - now).total_seconds(),
            "basis": basis, "pace_s": pace}  # fmt: skip


def _pace(status: RunStatus, plan: dict[str, Any]) -> tuple[float, str]:
    t = status.tally
    first, last = _parse(t.session_first), _parse(t.session_last)
    if t.session_devices >= 2 and last > first:
        pace = (last - first).total_seconds() / (t.session_devices - 1)
        return pace, f"pace so far ({pace:.2f} s a device over {t.session_devices} devices)"
    estimate = float(plan.get("seconds_per_device") or 0.0)
    return estimate, f"the plan's estimate ({estimate:.2f} s a device)"


def _parse(text: object) -> dt.datetime:
    try:
        return dt.datetime.fromisoformat(str(text))
    except ValueError:
        return dt.datetime.min.replace(tzinfo=dt.UTC)


def lines(facts: dict[str, Any]) -> list[str]:
    """The screen: short lines that fit 80 columns, one fact each."""
    dry = " (dry run: simulated instrument)" if facts["dry_run"] else ""
    out = [f"{facts['folder']}: lot {facts['lot']}{dry}", f"state: {facts['state']}"]
    h = facts["holder"]
    if facts["state"] == "running" and h["pid"]:
        out.append(f"held by: pid {h['pid']} on {h['host']} since {h['since']}")
    per_round = facts["devices_per_round"]
    of = f" of {per_round}" if per_round else ""
    out.append(f"round {facts['round']}: {facts['done_in_round']}{of} devices")
    if facts["schedule"]:
        out.append(f"schedule: {facts['schedule']}")
    counts = ", ".join(f"{n} {v}" for v, n in sorted(facts["verdicts"].items()))
    out.append(f"stored: {facts['stored']} devices" + (f" ({counts})" if counts else ""))
    out.append(f"output: {facts['output']}")
    if len(facts["ended"]) > 1:  # one session: its ending is the output line above
        for number, ended in enumerate(facts["ended"], start=1):
            out.append(f"session {number} ended: {ended or 'not recorded'}")
    eta = facts["eta"]
    if eta and eta["at"]:
        local = dt.datetime.fromisoformat(eta["at"]).astimezone().strftime("%H:%M:%S")
        out.append(f"expected end: {local} (in {_duration(eta['seconds'])}; {eta['basis']})")
    elif eta:
        out.append(f"expected end: none ({eta['basis']})")
    return out


def _duration(seconds: float) -> str:
    seconds = max(seconds, 0.0)
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"
