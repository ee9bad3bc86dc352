"""A reply must be complete within the timeout, however it arrives: an instrument that sends its
reply a byte at a time is timed out like a silent one, and the session is back in step after.

pyvisa-py restarts its wait with every chunk that arrives (it looks at its deadline only when a
wait for data ends empty), so without a deadline of our own such a reply never times out. The
responder here is written from that description: a TCP server on 127.0.0.1 that answers `DRIP?`
and `DRIP:BLOCK?` one byte every DRIP_S seconds, and everything else at once.
"""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator

import numpy as np
import pytest

from instruments.errors import InstrumentTimeout
from instruments.protocol import PROBE
from instruments.scpi import make_block
from instruments.transport import open_visa

IDN = b"TEST,DRIPPING-SMU,0001,1.0\n"
READING = b"+1.234567E+01,+1.800000E-03\n"  # 28 bytes: 1.4 s at one byte per 50 ms
BLOCK = make_block(np.arange(8, dtype="<f4").tobytes()) + b"\n"  # 36 bytes: 1.8 s
DRIP_S = 0.05
TIMEOUT_S = 0.3  # well under either dribbled reply's length

pytestmark = pytest.mark.robustness


class DrippingInstrument:
    """Answers *IDN? and FAST? at once; DRIP? and DRIP:BLOCK? one byte every DRIP_S."""

    def __init__(self) -> None:
        self.listener = socket.create_server(("127.0.0.1", 0))
        self.resource = f"TCPIP0::127.0.0.1::{self.listener.getsockname()[1]}::SOCKET"
        self.received: list[str] = []
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while True:
            try:
                conn, _ = self.listener.accept()
            except OSError:  # closed at the end of the test
                return
            threading.Thread(target=self._serve, args=(conn,), daemon=True).start()

    def _serve(self, conn: socket.socket) -> None:
        with conn, conn.makefile("rb") as lines:
            for line in lines:
                command = line.decode().strip()
                self.received.append(command)
                try:
                    self._answer(conn, command)
                except OSError:  # the driver closed the link mid-reply
                    return

    def _answer(self, conn: socket.socket, command: str) -> None:
        replies = {PROBE: IDN, "FAST?": b"fast\n"}
        dribbled = {"DRIP?": READING, "DRIP:BLOCK?": BLOCK, "DRIP:SHORT?": b"ok\n"}
        if command in replies:
            conn.sendall(replies[command])
        for byte in dribbled.get(command, b""):
            conn.sendall(bytes([byte]))
            time.sleep(DRIP_S)

    def close(self) -> None:
        self.listener.close()


@pytest.fixture
def instrument() -> Iterator[DrippingInstrument]:
    server = DrippingInstrument()
    yield server
    server.close()


@pytest.fixture
def transport(instrument):
    opened = open_visa(instrument.resource, timeout_s=TIMEOUT_S)
    yield opened
    opened.close()


def test_a_reply_dribbled_a_byte_at_a_time_times_out(transport) -> None:
    with pytest.raises(InstrumentTimeout, match=f"no complete reply within {TIMEOUT_S:g} s"):
        transport.query("DRIP?")


def test_after_a_dribbled_reply_timed_out_the_next_query_gets_its_own_answer(
    transport, instrument
) -> None:
    with pytest.raises(InstrumentTimeout):
        transport.query("DRIP?")
    # the rest of the dribble is drained, *IDN? confirms the stream is in step, then FAST?
    assert transport.query("FAST?") == "fast"
    assert instrument.received[-3:] == ["DRIP?", PROBE, "FAST?"]
    assert transport.query("FAST?") == "fast"


def test_a_dribbled_binary_block_times_out_too(transport) -> None:
    with pytest.raises(InstrumentTimeout):
        transport.query_block("DRIP:BLOCK?")
    assert transport.query("FAST?") == "fast"


def test_a_dribbled_reply_within_the_timeout_is_read(instrument) -> None:
    transport = open_visa(instrument.resource, timeout_s=5.0)  # 3 bytes take 0.15 s
    try:
        assert transport.query("DRIP:SHORT?") == "ok"
    finally:
        transport.close()
