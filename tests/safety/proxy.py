"""A fault-injecting TCP proxy between the driver and the simulator, line by line: the driver
talks SCPI to the proxy, the proxy to the simulator, and at one chosen message it breaks the
link the way a bench breaks (behind the wire: the driver sees only what a real link would show).

Faults (each fires once, at the first message `trigger` accepts):
  timeout     the message goes on, its next reply is lost (the driver's query times out)
  disconnect  the proxy drops both sockets instead of passing the message on; it goes on
              accepting new connections, so one reconnect can succeed (`dead` refuses them)
  garbage     the next reply is replaced by bytes that are no reply at all
  scpi_error  the message goes on, and an undefined command after it fills the error queue
  lid_open    the message goes on, then `SIMulation:LID OPEN`: the operator lifts the lid
  short       `on_short()` runs first (the test turns the device in the fixture into a short)
"""

from __future__ import annotations

import contextlib
import socket
import threading
from collections.abc import Callable
from dataclasses import dataclass, field

KINDS = ("timeout", "disconnect", "garbage", "scpi_error", "lid_open", "short")
GARBAGE = b"\x15#9\x00garbage?\xff"


@dataclass
class Fault:
    kind: str
    trigger: Callable[[str], bool]
    on_short: Callable[[], None] = lambda: None
    dead: bool = False  # after a disconnect, refuse every new connection
    fired_at: str | None = None


@dataclass
class _Link:
    client: socket.socket
    upstream: socket.socket
    drop_replies: int = 0
    garble_replies: int = 0
    lock: threading.Lock = field(default_factory=threading.Lock)

    def close(self) -> None:
        for sock in (self.client, self.upstream):
            with contextlib.suppress(OSError):
                sock.shutdown(socket.SHUT_RDWR)
            sock.close()


class FaultProxy:
    """Listens on 127.0.0.1; `resource` is what the station file names."""

    def __init__(self, upstream_port: int, fault: Fault) -> None:
        self.upstream_port = upstream_port
        self.fault = fault
        self.seen: list[str] = []  # every message the driver sent, in order
        self.connections = 0
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.05)
        self.resource = f"TCPIP0::127.0.0.1::{self._listener.getsockname()[1]}::SOCKET"
        self._stop = threading.Event()
        self._links: list[_Link] = []
        self._threads = [threading.Thread(target=self._accept, daemon=True)]
        self._threads[0].start()

    def close(self) -> None:
        self._stop.set()
        for link in self._links:
            link.close()
        for thread in self._threads:
            thread.join(timeout=5)
        self._listener.close()

    def __enter__(self) -> FaultProxy:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                client, _ = self._listener.accept()
            except TimeoutError:
                continue
            if self.fault.dead and self.fault.fired_at is not None:
                client.close()  # the instrument is gone for good
                continue
            self.connections += 1
            upstream = socket.create_connection(("127.0.0.1", self.upstream_port))
            for sock in (client, upstream):  # no delayed-ACK stall on each exchange
                sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            link = _Link(client, upstream)
            self._links.append(link)
            for target in (self._requests, self._replies):
                thread = threading.Thread(target=target, args=(link,), daemon=True)
                self._threads.append(thread)
                thread.start()

    def _requests(self, link: _Link) -> None:
        for line in _lines(link.client):
            message = line.decode("latin-1").rstrip("\r")
            self.seen.append(message)
            if not self._pass_on(link, message, line):
                return
        link.close()  # the driver closed its end

    def _pass_on(self, link: _Link, message: str, line: bytes) -> bool:
        fault = self.fault
        if fault.fired_at is not None or not fault.trigger(message):
            return _send(link.upstream, line + b"\n")
        fault.fired_at = message
        if fault.kind == "disconnect":
            link.close()
            return False
        if fault.kind == "short":
            fault.on_short()
        with link.lock:
            link.drop_replies += fault.kind == "timeout"
            link.garble_replies += fault.kind == "garbage"
        sent = _send(link.upstream, line + b"\n")
        if fault.kind == "scpi_error":
            sent = sent and _send(link.upstream, b"SOUR:VOLT:BOGUS 1\n")
        if fault.kind == "lid_open":
            sent = sent and _send(link.upstream, b"SIM:LID OPEN\n")
        return sent

    def _replies(self, link: _Link) -> None:
        for line in _lines(link.upstream):
            with link.lock:
                if link.drop_replies:
                    link.drop_replies -= 1
                    continue
                if link.garble_replies:
                    link.garble_replies -= 1
                    line = GARBAGE
            if not _send(link.client, line + b"\n"):
                return


def _lines(sock: socket.socket):
    buffer = b""
    while True:
        try:
            chunk = sock.recv(65536)
        except OSError:
            return
        if not chunk:
            return
        buffer += chunk
        while b"\n" in buffer:
            line, buffer = buffer.split(b"\n", 1)
            yield line


def _send(sock: socket.socket, data: bytes) -> bool:
    try:
        sock.sendall(data)
    except OSError:
        return False
    return True
