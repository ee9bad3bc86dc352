"""`python -m simulator serve ...`: run the simulated SMU as its own program.

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

from simulator.errors import OptionError
from simulator.faults import FaultSpec, load_faults, parse_fault
from simulator.options import SimOptions
from simulator.serial_port import start_serial
from simulator.server import start_server


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
    return parser


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
        handle = start_server(options_from(args))
    except (OptionError, OSError) as exc:
        print(f"simulator: {exc}", file=sys.stderr)
        return 2
    stop = threading.Event()
    for signum in (signal.SIGINT, signal.SIGTERM):
        signal.signal(signum, lambda *_: stop.set())
    if args.exit_with_stdin:
        threading.Thread(target=_watch_stdin, args=(stop,), daemon=True).start()
    serial = start_serial(handle.instrument) if args.serial else None
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
