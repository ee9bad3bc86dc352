"""Fixtures for the instrument layer: a scripted in-process instrument and a tiny TCP server."""

from __future__ import annotations

import dataclasses
import socket
import threading
import time
from collections.abc import Callable, Iterator

import pytest

from instruments.dialect import Dialect, load_dialect
from instruments.loopback import CallableTransport
from instruments.smu import ScpiSmu

NO_ERROR = '0,"No error"'


class ScriptedInstrument:
    """A CallableTransport handler: records every message, answers queries from `replies`
    (exact text; a list is answered in turn) and SYST:ERR? from an error queue. An unscripted
    query raises KeyError, so a test never passes on a reply nobody wrote."""

    def __init__(self, replies: dict[str, str | list[str]] | None = None) -> None:
        self.sent: list[str] = []
        self.errors: list[str] = []
        self.replies: dict[str, str | list[str]] = {"*IDN?": "TEST,SCRIPTED-SMU,0001,1.0"}
        self.replies["*OPC?"] = "1"
        self.replies["STAT:QUES:EVEN?"] = "0"  # no clamp latched (the default dialect's lists)
        self.replies.update(replies or {})

    def __call__(self, message: str) -> str | None:
        self.sent.append(message)
        if message == "SYST:ERR?":
            return self.errors.pop(0) if self.errors else NO_ERROR
        if "?" not in message:
            return None
        reply = self.replies[message]
        return reply.pop(0) if isinstance(reply, list) else reply


@pytest.fixture
def dialect() -> Dialect:
    """The default dialect with one command per message, so that a test can script each
    command's text; test_compound_messages.py covers the joined messages."""
    return dataclasses.replace(load_dialect("scpi1999"), max_message_bytes=None)


@pytest.fixture
def make_instrument() -> type[ScriptedInstrument]:
    return ScriptedInstrument


@pytest.fixture
def instrument() -> ScriptedInstrument:
    return ScriptedInstrument()


@pytest.fixture
def smu(instrument: ScriptedInstrument, dialect: Dialect) -> ScpiSmu:
    return ScpiSmu(CallableTransport(instrument), dialect)


class ScriptedServer:
    """A line-based server on 127.0.0.1 standing in for an instrument at the socket level.

    `respond(command)` runs in the connection's thread (so it may sleep, like a slow
    instrument) and returns bytes to send, None for no reply, or False to drop the connection.
    Every command received is appended to `received`.
    """

    def __init__(self, respond: Callable[[str], bytes | bool | None]) -> None:
        self.respond = respond
        self.received: list[str] = []
        self._stop = threading.Event()
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.02)
        self.port = self._listener.getsockname()[1]
        self.resource = f"TCPIP0::127.0.0.1::{self.port}::SOCKET"
        self._threads = [threading.Thread(target=self._accept, daemon=True)]
        self._threads[0].start()

    def wait_for(self, condition: Callable[[list[str]], bool], timeout_s: float = 2.0) -> bool:
        """Whether `condition(received)` became true in time (writes do not wait for the peer)."""
        deadline = time.monotonic() + timeout_s
        while not condition(self.received):
            if time.monotonic() > deadline:
                return False
            time.sleep(0.005)
        return True

    def close(self) -> None:
        self._stop.set()
        for thread in self._threads:
            thread.join(timeout=5)
        self._listener.close()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._listener.accept()
            except TimeoutError:
                continue
            thread = threading.Thread(target=self._serve, args=(conn,), daemon=True)
            self._threads.append(thread)
            thread.start()

    def _serve(self, conn: socket.socket) -> None:
        conn.settimeout(0.02)
        buffer = b""
        with conn:
            while not self._stop.is_set():
                try:
                    data = conn.recv(65536)
                except TimeoutError:
                    continue
                except OSError:
                    return
                if not data:
                    return
                buffer += data
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    if not self._answer(conn, line.decode().strip()):
                        return

    def _answer(self, conn: socket.socket, command: str) -> bool:
        self.received.append(command)
        reply = self.respond(command)
        if reply is False:
            conn.shutdown(socket.SHUT_RDWR)
            return False
        if isinstance(reply, bytes):
            conn.sendall(reply)
        return True


@pytest.fixture
def scripted_server() -> Iterator[Callable[[Callable[[str], bytes | bool | None]], ScriptedServer]]:
    servers: list[ScriptedServer] = []

    def start(respond: Callable[[str], bytes | bool | None]) -> ScriptedServer:
        server = ScriptedServer(respond)
        servers.append(server)
        return server

    yield start
    for server in servers:
        server.close()


@pytest.fixture
def free_port() -> int:
    """A port on 127.0.0.1 that nothing listens on (bound once, then released)."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]
