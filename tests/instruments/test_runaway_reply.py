"""A runaway reply (an instrument that sends megabytes where a number belongs) is refused with a
short message, and the session is back in step after it.

What the message says of a reply goes to the screen, the journal, the CSV and the database; a
20 MB reply once became a 20 MB `reasons` field in each. The responder here is written from that
description: a TCP server on 127.0.0.1 answering `HUGE?` with 20 MB and no end of line for a
while, `LONG?` with a 3 MB line of digits (under the line limit, but not a reading), and
`FAST?` at once.
"""

from __future__ import annotations

import socket
import threading
from collections.abc import Iterator

import pytest

from instruments.errors import LONGEST_DETAIL, InstrumentError, ReplyError
from instruments.protocol import PROBE
from instruments.scpi import parse_number
from instruments.transport import MAX_LINE_BYTES, open_visa

HUGE = b"7" * (20 * 1024 * 1024) + b"\n"
LONG = b"1" * (3 * 1024 * 1024) + b"\n"


class RunawayInstrument:
    def __init__(self) -> None:
        self.listener = socket.create_server(("127.0.0.1", 0))
        self.resource = f"TCPIP0::127.0.0.1::{self.listener.getsockname()[1]}::SOCKET"
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while True:
            try:
                conn, _ = self.listener.accept()
            except OSError:
                return
            threading.Thread(target=self._serve, args=(conn,), daemon=True).start()

    def _serve(self, conn: socket.socket) -> None:
        replies = {PROBE: b"TEST,RUNAWAY-SMU,0001,1.0\n", "HUGE?": HUGE, "LONG?": LONG,
                   "FAST?": b"fast\n"}  # fmt: skip
        with conn, conn.makefile("rb") as lines:
            for line in lines:
                try:
                    conn.sendall(replies.get(line.decode().strip(), b""))
                except OSError:
                    return

    def close(self) -> None:
        self.listener.close()


@pytest.fixture
def instrument() -> Iterator[RunawayInstrument]:
    server = RunawayInstrument()
    yield server
    server.close()


def test_a_reply_beyond_the_line_limit_is_refused_and_the_session_recovers(instrument):
    assert len(HUGE) > MAX_LINE_BYTES
    link = open_visa(instrument.resource, timeout_s=5)
    try:
        link.learn_probe()
        with pytest.raises(ReplyError, match="no end of line") as caught:
            link.query("HUGE?")
        assert len(str(caught.value)) < 2 * LONGEST_DETAIL
        assert link.query("FAST?") == "fast"
    finally:
        link.close()


def test_a_long_reply_that_is_not_a_number_is_quoted_in_part(instrument):
    link = open_visa(instrument.resource, timeout_s=5)
    try:
        reply = link.query("LONG?")
        assert len(reply) == len(LONG) - 1
        with pytest.raises(ReplyError) as caught:
            parse_number(reply + "x")
        message = str(caught.value)
        assert len(message) < 2 * LONGEST_DETAIL and "3,145,729 characters in all" in message
    finally:
        link.close()


def test_every_instrument_error_is_cut_to_a_readable_length():
    error = InstrumentError("TCPIP0::192.0.2.1::5025::SOCKET", "READ?", "x" * 5_000_000)
    assert len(error.detail) < LONGEST_DETAIL + 60 and "5,000,000 characters in all" in str(error)
