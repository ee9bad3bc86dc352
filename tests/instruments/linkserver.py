"""A TCP server on 127.0.0.1 for responders that end their messages their own way: program
messages end in `term_in` (LF, CR or CRLF), replies in `term_out`, as an instrument's manual
states it (IEEE 488.2 ends messages in NL; RS-232-minded instruments often use CR or CRLF).

The responder gets each program message without its terminator and returns text or bytes (a reply
holding a block), the terminator added here, or None for no reply.
"""

from __future__ import annotations

import socket
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager

Reply = str | bytes | None
TERMINATORS = {"LF": b"\n", "CR": b"\r", "CRLF": b"\r\n"}


class LinkServer:
    def __init__(
        self, respond: Callable[[str], Reply], *, term_in: str = "LF", term_out: str = "LF"
    ) -> None:
        self.respond = respond
        self.term_in = TERMINATORS[term_in]
        self.term_out = TERMINATORS[term_out]
        self.received: list[str] = []
        self._stop = threading.Event()
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.02)
        self.port = self._listener.getsockname()[1]
        self.resource = f"TCPIP0::127.0.0.1::{self.port}::SOCKET"
        self._threads = [threading.Thread(target=self._accept, daemon=True)]
        self._threads[0].start()

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
                while self.term_in in buffer:
                    line, buffer = buffer.split(self.term_in, 1)
                    self._answer(conn, line.decode("latin-1"))

    def _answer(self, conn: socket.socket, message: str) -> None:
        self.received.append(message)
        reply = self.respond(message)
        if isinstance(reply, str):
            conn.sendall(reply.encode("latin-1") + self.term_out)
        elif isinstance(reply, bytes):
            conn.sendall(reply + self.term_out)


@contextmanager
def serving(respond: Callable[[str], Reply], **terms: str) -> Iterator[LinkServer]:
    server = LinkServer(respond, **terms)
    try:
        yield server
    finally:
        server.close()
