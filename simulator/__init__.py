"""A simulated SMU behind a switch matrix, loaded with a seeded lot, served as SCPI over TCP.

Public API:
    start_server(SimOptions(...)) -> ServerHandle (.resource, .port, .instrument, .stop())
    Session(instrument).handle(message) -> reply text or None   (in process, no socket)
    build_instrument(SimOptions(...)) -> Instrument
    make_lot(...), devices.* models
Command line: python -m simulator serve --help
"""

from simulator.lot import Lot, LotDevice, make_lot
from simulator.options import SimOptions, build_instrument
from simulator.server import ServerHandle, start_server
from simulator.session import Session
from simulator.version import __version__

__all__ = [
    "Lot",
    "LotDevice",
    "ServerHandle",
    "Session",
    "SimOptions",
    "__version__",
    "build_instrument",
    "make_lot",
    "start_server",
]
