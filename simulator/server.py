"""The SCPI server on raw TCP: newline-terminated messages both ways, one shared instrument.

Input is read as a byte stream and split on "\\n" (a trailing "\\r" is dropped); each reply goes
out in one write with TCP_NODELAY set. Any number of clients may connect at once; they share the
instrument (a second connection sees the first one's output state). Wire faults act here: a
late reply waits in the connection's own thread (other connections go on), a close drops only
the connection whose message triggered it.
"""

from __future__ import annotations

import contextlib
import socket
import socketserver
import threading
from collections.abc import Callable
from dataclasses import dataclass

from simulator.errors import ScpiError
from simulator.instrument import Instrument
from simulator.options import SimOptions, build_instrument
from simulator.session import Response, Session

POLL_S = 0.02  # how often serve_forever looks for a stop request: stop() takes about this long
MAX_MESSAGE_BYTES = 1 << 20  # a longer message is dropped, reported as -363


class _Handler(socketserver.BaseRequestHandler):
    server: _Server

    def setup(self) -> None:
        self.request.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self.server.track(self.request, True)

    def handle(self) -> None:
        session = Session(self.server.instrument)
        pending = bytearray()
        overlong = False  # the message being received has passed MAX_MESSAGE_BYTES
        try:
            while chunk := self.request.recv(65536):
                pending += chunk
                while (end := pending.find(b"\n")) >= 0:
                    message = pending[:end].decode("latin-1")
                    del pending[: end + 1]
                    if not self._answer(session, message, overlong or end > MAX_MESSAGE_BYTES):
                        self.request.shutdown(socket.SHUT_RDWR)
                        return  # a close fault: the connection drops mid-exchange
                    overlong = False
                if len(pending) > MAX_MESSAGE_BYTES:
                    pending.clear()
                    overlong = True
        except OSError:
            pass  # the client went away mid-exchange: nothing to answer

    def _answer(self, session: Session, message: str, overlong: bool) -> bool:
        if overlong:
            with session.instrument.lock:
                session.instrument.report(ScpiError(-363, "message too long"))
            return True
        return deliver(session.respond(message), self.request.sendall, self.server.stopping)

    def finish(self) -> None:
        self.server.track(self.request, False)


class _Server(socketserver.ThreadingTCPServer):
    allow_reuse_address = True
    daemon_threads = True

    def __init__(self, address: tuple[str, int], instrument: Instrument) -> None:
        self.instrument = instrument
        self.stopping = threading.Event()  # ends late-reply waits when the server stops
        self._clients: set[socket.socket] = set()
        self._clients_lock = threading.Lock()
        super().__init__(address, _Handler)

    def track(self, client: socket.socket, connected: bool) -> None:
        with self._clients_lock:
            (self._clients.add if connected else self._clients.discard)(client)

    def drop_clients(self) -> None:
        with self._clients_lock:
            for client in self._clients:
                with contextlib.suppress(OSError):
                    client.shutdown(socket.SHUT_RDWR)


def deliver(response: Response, send: Callable[[bytes], object], stop: threading.Event) -> bool:
    """Send a response as its wire fault says; False when the connection must be closed."""
    fault = response.fault
    kind = None if fault is None else fault.kind
    if kind == "close":
        return False
    if kind == "late-reply":
        assert fault is not None
        if stop.wait(fault.spec.delay_s):
            return False
    text = response.delivered
    if text is not None:
        send(text.encode("latin-1") + b"\n")
    return True


@dataclass
class ServerHandle:
    """A running server: `resource` is the VISA resource string to open with pyvisa."""

    instrument: Instrument
    host: str
    port: int
    _server: _Server
    _thread: threading.Thread

    @property
    def resource(self) -> str:
        return f"TCPIP0::{self.host}::{self.port}::SOCKET"

    def stop(self) -> None:
        """Stop listening, disconnect every client, release the port."""
        self._server.stopping.set()
        self._server.shutdown()
        self._server.drop_clients()
        self._server.server_close()
        self._thread.join(timeout=5)

    def __enter__(self) -> ServerHandle:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def start_server(options: SimOptions | None = None) -> ServerHandle:
    """Build an instrument from `options` and serve it on 127.0.0.1 in a background thread."""
    o = options or SimOptions()
    instrument = build_instrument(o)
    server = _Server((o.host, o.port), instrument)
    host, port = server.server_address[:2]
    thread = threading.Thread(
        target=server.serve_forever, args=(POLL_S,), name="scpi-server", daemon=True
    )
    thread.start()
    return ServerHandle(instrument, str(host), int(port), server, thread)
