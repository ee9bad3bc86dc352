"""`python -m simulator serve ...`: run the simulated SMU as its own program
(`python -m simulator chamber ...`: the simulated temperature chamber, see chamber_server.py).

Prints exactly one line, the VISA resource string, once listening (with --serial a second line,
the ASRL resource of a pseudo-terminal serving the same instrument); serves until SIGINT or
SIGTERM (exit 0) or, with --exit-with-stdin, until standard input reaches end of file, so an
embedded simulator dies with its parent even when the parent is killed.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading

from simulator.chamber_server import ChamberHandle, ChamberOptions, start_chamber
from simulator.errors import OptionError
from simulator.faults import FaultSpec, load_faults, parse_fault
from simulator.options import SimOptions
from simulator.serial_port import start_serial
from simulator.server import ServerHandle, start_server


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="python -m simulator", description=__doc__.split("\n")[0])
    commands = parser.add_subparsers(dest="command", required=True)
    serve = commands.add_parser("serve", help="serve the simulated SMU over TCP")
    d = SimOptions()
    serve.add_argument("--host", default=d.host, help="address to bind (only 127.0.0.1)")
    serve.add_argument("--port", type=int, default=d.port, help="TCP port; 0 lets the OS choose")
    serve.add_argument("--seed", type=int, default=d.seed, help="seed of the lot and the noise")
    serve.add_argument("--devices", type=int, default=d.devices, help="tray channels / devices")
    serve.add_argument("--preset", default=d.preset, help="device type, e.g. FLC-1.8")
    serve.add_argument("--spread", type=float, default=d.spread, help="process spread scale")
    serve.add_argument("--defect-rate", type=float, default=d.defect_rate, help="0..1")
    serve.add_argument("--clock", choices=("real", "virtual"), default=d.clock)
    serve.add_argument("--line-frequency", type=float, choices=(50.0, 60.0), default=50.0)
    serve.add_argument("--temperature", type=float, default=d.temperature, help="ambient, C")
    serve.add_argument(
        "--thermal-resistance",
        type=float,
        default=d.thermal_resistance,
        help="junction to ambient, K/W (self-heating; 0 = off)",
    )
    serve.add_argument("--thermal-time", type=float, default=d.thermal_time, help="tau, s")
    serve.add_argument("--reading-gain", type=float, default=0.0, help="relative current error")
    serve.add_argument(
        "--range-offset", type=float, default=0.0, help="current offset, fraction of range"
    )
    serve.add_argument(
        "--contact-spread", type=float, default=0.0, help="relative spread drawn per contact"
    )
    serve.add_argument(
        "--noise-seed", type=int, default=0, help="own noise on the same lot (0: from --seed)"
    )
    serve.add_argument("--exit-with-stdin", action="store_true", help="stop when stdin closes")
    serve.add_argument(
        "--serial", action="store_true", help="also serve on a pseudo-terminal (ASRL resource)"
    )
    serve.add_argument(
        "--fault",
        action="append",
        default=[],
        metavar="KIND[:KEY=VALUE,...]",
        help="arm a fault at start (repeatable), e.g. late-reply:on=READ?,after=10,delay=3",
    )
    serve.add_argument("--faults", metavar="FILE.yaml", help="arm the faults listed in a file")
    _chamber_parser(commands)
    return parser


def _chamber_parser(commands: argparse._SubParsersAction) -> None:
    c = ChamberOptions()
    chamber = commands.add_parser("chamber", help="serve a simulated temperature chamber over TCP")
    chamber.add_argument("--host", default=c.host, help="address to bind (only 127.0.0.1)")
    chamber.add_argument("--port", type=int, default=c.port, help="TCP port; 0 lets the OS choose")
    chamber.add_argument("--room", type=float, default=c.room_c, help="room temperature, C")
    chamber.add_argument("--tau-air", type=float, default=c.tau_air_s, help="air lag, s")
    chamber.add_argument("--tau-mount", type=float, default=c.tau_mount_s, help="mount lag, s")
    chamber.add_argument("--reach", type=float, default=c.reach_k, help="weak: K from room")
    chamber.add_argument("--speed", type=float, default=c.speed, help="simulated s per real s")
    chamber.add_argument("--lowest", type=float, default=c.lowest_c, help="lowest set point, C")
    chamber.add_argument("--highest", type=float, default=c.highest_c, help="highest, C")
    chamber.add_argument("--exit-with-stdin", action="store_true", help="stop when stdin closes")
    chamber.add_argument(
        "--fault", action="append", default=[], help="sensor-open, weak, door or mute (repeatable)"
    )


def chamber_options_from(args: argparse.Namespace) -> ChamberOptions:
    return ChamberOptions(
        host=args.host,
        port=args.port,
        room_c=args.room,
        tau_air_s=args.tau_air,
        tau_mount_s=args.tau_mount,
        reach_k=args.reach,
        speed=args.speed,
        lowest_c=args.lowest,
        highest_c=args.highest,
        faults=tuple(args.fault),
    )


def options_from(args: argparse.Namespace) -> SimOptions:
    return SimOptions(
        host=args.host,
        port=args.port,
        seed=args.seed,
        devices=args.devices,
        preset=args.preset,
        spread=args.spread,
        defect_rate=args.defect_rate,
        clock=args.clock,
        line_frequency=args.line_frequency,
        faults=_faults(args),
        temperature=args.temperature,
        thermal_resistance=args.thermal_resistance,
        thermal_time=args.thermal_time,
        reading_gain=args.reading_gain,
        range_offset=args.range_offset,
        contact_spread=args.contact_spread,
        noise_seed=args.noise_seed,
    )


def _faults(args: argparse.Namespace) -> tuple[FaultSpec, ...]:
    listed = load_faults(args.faults) if args.faults else ()
    return listed + tuple(parse_fault(text) for text in args.fault)


def _watch_stdin(stop: threading.Event) -> None:
    while sys.stdin.buffer.read(4096):
        pass
    stop.set()


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        if args.command == "chamber":
            handle: ServerHandle | ChamberHandle = start_chamber(chamber_options_from(args))
        else:
            handle = start_server(options_from(args))
    except (OptionError, OSError) as exc:
        print(f"simulator: {exc}", file=sys.stderr)
        return 2
    stop = threading.Event()
    for signum in (signal.SIGINT, signal.SIGTERM):
        signal.signal(signum, lambda *_: stop.set())
    if args.exit_with_stdin:
        threading.Thread(target=_watch_stdin, args=(stop,), daemon=True).start()
    smu = isinstance(handle, ServerHandle)
    serial = start_serial(handle.instrument) if smu and args.serial else None
    print(handle.resource, flush=True)
    if serial is not None:
        print(serial.resource, flush=True)
    while not stop.wait(0.1):
        pass
    if serial is not None:
        serial.stop()
    handle.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
