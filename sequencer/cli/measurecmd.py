"""`ccbench run RECIPE`: measure, judge and store every device of a recipe, on one instrument
or several, and leave every output off, whatever ends the run."""

from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
import getpass
import json
import platform
import traceback
from pathlib import Path

from rich.console import Console

from sequencer import __version__
from sequencer.bench import multibench, temperaturerun
from sequencer.bench.benchrun import GATE, Bench, Terminated, exchange_log, on_bench
from sequencer.bench.lotrun import run_lot
from sequencer.bench.parts import PartBench
from sequencer.cli import detach, operatorview, partcmd, reportcmd, statuscmd, traycmd, uploadcmd
from sequencer.cli import runcmd as runsession
from sequencer.cli.checkcmd import HAZARD_HELP, judge_can_work, preflight_all
from sequencer.cli.exits import EXIT_OUTPUT_MAY_BE_ON, Stopped, why_stopped
from sequencer.cli.view import plan_summary, showing_devices, summary_table
from sequencer.model.errors import CcbenchError, RecipeError, RunError
from sequencer.plan.make import make_plan
from sequencer.recipe.fields import MAX_TEXT
from sequencer.recipe.load import Recipe, load_recipe
from sequencer.run.estimate import after_run, predict
from sequencer.safety.rules import CAUTION, is_hazardous
from sequencer.store.runfolder import folder_name
from sequencer.store.shared import shipper
from sequencer.store.tempcofile import TEMPCO_FILE, write_tempcos


def add_parser(sub: argparse._SubParsersAction) -> None:
    run = sub.add_parser("run", help="measure, judge and store every device of a recipe")
    run.add_argument("recipe", type=Path)
    run.add_argument("--sim", action="store_true", help="use the embedded simulated SMU")
    run.add_argument("--out", type=Path, help="run folder (default runs/<lot>-<time>)")
    run.add_argument("--lot", help="the lot under test (default: the recipe's lot); recorded")
    traycmd.add_options(run)
    run.add_argument("--send-dry-run", action="store_true", help=uploadcmd.SEND_DRY_RUN_HELP)
    run.add_argument("--station", type=Path, help="station file instead of the recipe's")
    run.add_argument("--operator", default="", help="operator name for the records")
    run.add_argument("--part-by-part", action="store_true", help=partcmd.FLAG_HELP)
    run.add_argument("--operator-view", action="store_true", help=operatorview.FLAG_HELP)
    run.add_argument("--allow-hazardous-voltage", action="store_true", help=HAZARD_HELP)
    runsession.add_run_options(run)
    detach.add_options(run)


def _default_folder(lot: str, console: Console) -> Path:
    name = folder_name(lot)
    if name != lot:
        console.print(f"the lot {lot!r} is not a folder name; its run folder is named {name!r}")
    return Path("runs") / f"{name}-{dt.datetime.now():%Y%m%d-%H%M%S}"


def _lot_option(recipe: Recipe, lot: str | None) -> Recipe:
    """`--lot`: the same recipe for another lot, so each lot needs no edit (and no new hash)."""
    if lot is None:
        return recipe
    if not lot.strip() or len(lot) > MAX_TEXT or not lot.isprintable():
        raise RecipeError("command line", None, "--lot", "must be a short printable name")
    return dataclasses.replace(recipe, lot=lot.strip())


def cmd_run(args: argparse.Namespace, console: Console) -> int:
    partcmd.check_options(args)
    recipe = _lot_option(load_recipe(args.recipe, station_path=args.station), args.lot)
    plan = make_plan(recipe)
    recipe = traycmd.with_serials(recipe, plan, args)  # the map is checked before anything opens
    preflight_all(recipe, plan, args)  # refuses before anything is started or opened
    for warning in judge_can_work(recipe, plan):  # else a plan the judge cannot use fails all
        console.print(f"[yellow]ccbench: warning:[/] {warning}", soft_wrap=True)
    resource = "sim" if args.sim else "; ".join(i.resource for i in recipe.station.instruments)
    prediction = predict(recipe, plan)  # reads the dialects before any caution is shown
    _cautions(console, recipe, plan)
    if not args.operator_view:  # the production screen shows no plan or estimate
        console.print(plan_summary(recipe, plan, prediction), soft_wrap=True)
    out = args.out or _default_folder(recipe.lot, console)
    repeat = temperaturerun.schedule(recipe, runsession.repeat_for(recipe, args))
    if args.resume and repeat is not None and (args.every, args.for_, args.rounds) == (None,) * 3:
        console.print(f"resume: the run's schedule goes on: {repeat.describe()}", soft_wrap=True)
    several = len(recipe.station.instruments) > 1
    if recipe.temperatures and (several or args.part_by_part):
        raise RunError(
            f"{recipe.file}: 'temperatures:' runs on a station with one SMU and a tray only: "
            "use a station with one instrument, without --part-by-part"
        )
    if detach.wanted(args):
        return detach.start(args.argv, out, console, named_out=args.out is not None)
    manifest = _manifest(recipe, plan, args, resource)
    manifest |= runsession.manifest_extras(recipe, resource, repeat)
    manifest |= partcmd.manifest_extras(recipe, args, repeat)
    manifest |= traycmd.manifest_extras(recipe)
    manifest["planned"] = statuscmd.planned(plan, prediction, repeat, args.part_by_part)
    shipper.check_driver(recipe.station.results_database)
    store = runsession.open_store(out, manifest, args, console)
    if not args.part_by_part and runsession.nothing_left(console, store, plan, repeat, _now()):
        return 0
    bench = multibench.Benches() if several else Bench()
    status, error, uploads = "failed", None, None
    try:
        database = recipe.station.results_database
        dry = bool(manifest["dry_run"])
        uploads = uploadcmd.start_for(database, store, console, dry_run=dry, send=args.send_dry_run)
        if several:  # one worker per instrument; sequencer/multibench.py
            summary = multibench.measure_on_benches(
                recipe, plan, args.sim, out, store,
                lambda one: runsession.measure_rounds(console, store, plan, repeat, one),
                lambda text: console.print(text, soft_wrap=True),
                lambda total: showing_devices(console, total), bench, GATE,
            )  # fmt: skip
        else:
            summary = _on_one_bench(
                console, recipe, plan, resource, out, store, repeat, bench, args.part_by_part,
                args.operator_view,
            )  # fmt: skip
        status = summary.status
    except (Exception, KeyboardInterrupt, Terminated) as exc:
        status = "interrupted" if isinstance(exc, KeyboardInterrupt | Terminated) else "failed"
        error = _run_error(exc, bench, out)
    finally:
        GATE.settle()  # measuring is over: a late signal cannot cut the record or the last line
        ended = error.message if error else f"{status}; {bench.ending()}"
        _finish(console, store, status, ended)
        uploadcmd.finish(uploads, console)
    if error is not None:
        if bench.may_be_on():
            error.exit_code = EXIT_OUTPUT_MAY_BE_ON
        raise error
    console.print(summary_table(summary))
    if recipe.temperatures:
        _tempcos(console, recipe, store, out)
    if not args.operator_view:
        took = after_run(prediction, len(plan.channels), summary.done, summary.seconds)
        console.print(took, soft_wrap=True)
    reportcmd.after_run(console, out)
    console.print(f"{bench.ending()}; results: {out / 'devices.csv'}", soft_wrap=True)
    return EXIT_OUTPUT_MAY_BE_ON if bench.may_be_on() else 0


def _tempcos(console: Console, recipe: Recipe, store, out: Path) -> None:
    """Each device's temperature coefficient of the regulated current, on screen and in
    tempco.csv."""
    results = write_tempcos(out, store.run_id, recipe.tempco)
    for r in results:
        if r.fit is None:
            console.print(f"tempco {r.device}: {r.verdict} ({r.reason})", soft_wrap=True)
            continue
        u = f" ± {r.fit.u_pct_per_k:.2g}" if r.fit.u_pct_per_k == r.fit.u_pct_per_k else ""
        why = f" ({r.reason})" if r.reason else ""
        console.print(
            f"tempco {r.device}: {r.fit.pct_per_k:+.4f}{u} %/K over {r.fit.points} results: "
            f"{r.verdict}{why}",
            soft_wrap=True,
        )
    console.print(f"temperature coefficients: {out / TEMPCO_FILE}", soft_wrap=True)


def _run_error(exc: BaseException, bench: Bench | multibench.Benches, out: Path) -> CcbenchError:
    """The one error a run ends with, its last line saying how the output was left. The first
    error wins: nothing that fails after it (a log file on a full disk) may take its place."""
    from instruments import InstrumentError  # start-up speed: `instruments` loads pyvisa

    ending = bench.ending()
    if isinstance(exc, InstrumentError):
        return RunError(f"instrument: {exc}; {ending}")
    if isinstance(exc, CcbenchError):
        exc.message = f"{exc.message}; {ending}"
        return exc
    if isinstance(exc, KeyboardInterrupt | Terminated):
        return Stopped(f"{why_stopped(exc)}; {ending}; what was measured is kept in {out}")
    # a bug (in the judge, say): still one line, the output state in it
    detail = f"internal error ({type(exc).__name__}: {exc}); {ending}"
    try:
        (out / "traceback.txt").write_text(traceback.format_exc(), encoding="utf-8")
    except OSError as failed:
        return RunError(f"{detail}; its traceback could not be saved ({failed.strerror})")
    return RunError(f"{detail}; details in {out / 'traceback.txt'}")


def _finish(console: Console, store, status: str, ended: str) -> None:
    """Record how the session ended, with what the screen no longer showed."""
    lost = getattr(console.file, "lost", "")
    problem = store.finish(status, _now(), ended=f"{ended}; {lost}" if lost else ended)
    if problem and status == "completed":  # after a failure, the failure is the news
        console.print(f"[bold yellow]ccbench:[/] {problem}", soft_wrap=True)


def _on_one_bench(
    console, recipe, plan, resource, out, store, repeat, bench, part_by_part, operator_view=False
):
    """The run on the station's one instrument (benchrun.on_bench), its exchanges in scpi.log."""
    from instruments import connect  # start-up speed: `instruments` loads pyvisa
    from sequencer.run.startnotes import instrument_record  # start-up speed, as above

    def chamber_left(line):
        bench.chamber = line

    def announce(text):
        console.print(text, soft_wrap=True)

    sim = resource == "sim"
    with (
        exchange_log(out / "scpi.log") as log,
        GATE.held(),
        temperaturerun.chamber_in_the_loop(recipe, sim, announce, chamber_left) as chamber,
    ):
        bench.connecting = True
        conn = connect(
            resource,
            dialect=recipe.station.dialect,
            timeout_s=recipe.station.timeout_s,
            spy_log=log,
            sim_options=recipe.station.simulator_options if resource == "sim" else None,
            channels=recipe.station.channels,
            **recipe.station.instruments[0].link.connect_options(),
        )

        def measure(guard):
            store.set_identity(conn.resource, conn.identity)
            store.note_instrument("instrument", instrument_record(conn.smu))
            if part_by_part:
                tester = PartBench(recipe, plan, conn.smu, store, guard)
                write, sim = conn.smu.transport.write, resource == "sim"
                return partcmd.from_command_line(console, tester, sim, write, operator_view)

            def one_round(part):
                if chamber is not None:  # the output is off between rounds: soak first
                    with GATE.raising():
                        chamber.before_round(store)
                return _measure(console, recipe, part, conn.smu, store, guard)

            return runsession.measure_rounds(console, store, plan, repeat, one_round)

        return on_bench(conn, recipe, plan, measure, bench, GATE, announce)


def _measure(console, recipe, plan, smu, store, guard):
    with showing_devices(console, len(plan.channels)) as shown:
        return run_lot(recipe, plan, smu, store, shown, guard=guard)


def _cautions(console: Console, recipe: Recipe, plan) -> None:
    console.print(f"[yellow]{CAUTION}[/]", soft_wrap=True)
    limits = recipe.effective_limits
    if is_hazardous(plan, limits):
        how = "in the recipe" if recipe.hazardous_voltage_acknowledged else "on the command line"
        console.print(
            f"[bold red]HAZARDOUS VOLTAGE:[/] this run applies up to {plan.peak_voltage_v:g} V "
            f"(touch-safe limit {limits.touch_safe_v:g} V; acknowledged {how}). The fixture "
            "lid must stay closed; the interlock is read before every such level and the run "
            "stops if it opens.",
            soft_wrap=True,
        )


def _manifest(recipe: Recipe, plan, args: argparse.Namespace, resource: str) -> dict[str, object]:
    return {
        "started": _now(),
        "product": recipe.product,
        "lot": recipe.lot,
        "operator": args.operator or recipe.operator or getpass.getuser(),
        "host": platform.node(),
        "software_version": __version__,
        "recipe_file": recipe.file,
        "recipe_sha256": recipe.digest,
        "recipe_text": recipe.text,
        "station": recipe.station.name,
        "station_text": recipe.station.text,
        "resource": resource,
        "simulator": json.dumps(recipe.station.simulator_options) if resource == "sim" else None,
        # A simulated instrument (--sim, or a station whose resources are `sim`): never a
        # production result.
        "dry_run": all(part == "sim" for part in resource.split("; ")),
        "hazardous_voltage": _acknowledgement(recipe, plan, args),
    }


def _acknowledgement(recipe: Recipe, plan, args: argparse.Namespace) -> str | None:
    """Who allowed levels above the touch-safe voltage, for the run record (None: no such
    level is planned, or nobody needed to)."""
    if not is_hazardous(plan, recipe.effective_limits):
        return None
    if recipe.hazardous_voltage_acknowledged:
        return f"acknowledged in the recipe ({recipe.file})"
    if getattr(args, "allow_hazardous_voltage", False):
        return "acknowledged on the command line (--allow-hazardous-voltage)"
    return None


def _now() -> str:
    return dt.datetime.now(dt.UTC).isoformat(timespec="milliseconds")


COMMANDS = {"run": cmd_run}
