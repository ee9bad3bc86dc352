"""VisaTransport through pyvisa-py over TCP to small in-test servers: blocks, timeouts, faults.

Each failure mode here was measured for pyvisa-py 0.8.1 in SCPI.md (sections 0, 1.3-1.5).
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest

from instruments.errors import (
    InstrumentDisconnected,
    InstrumentError,
    InstrumentTimeout,
    ReplyError,
)
from instruments.protocol import PROBE, Transport
from instruments.scpi import make_block
from instruments.transport import open_visa, resource_problem

IDN = b"TEST,SOCKET-SMU,0001,1.0\n"
LF_RICH = np.full(10_000, 0x0A0A0A0A, dtype="<u4").view("<f4")  # 40 kB, all bytes 0x0A
TIMEOUT_S = 0.3


def instrument(command: str) -> bytes | bool | None:
    """A well-behaved instrument with a few deliberately misbehaving queries (False: close)."""
    if command == PROBE:
        return IDN
    if command == "FAST?":
        return b"fast\n"
    if command == "SLOW?":
        time.sleep(TIMEOUT_S * 2)  # answers, but after the driver gave up
        return b"late\n"
    if command == "BLOCK?":
        return make_block(LF_RICH.tobytes() + np.arange(3, dtype="<f4").tobytes()) + b"\n"
    if command == "BLOCK:BE?":
        return make_block(np.array([1e-3, 2e-3], dtype=">f4").tobytes()) + b"\n"
    if command == "BLOCK:LONG?":  # declares 8 bytes, sends 12: the rest must not pass as data
        return make_block(b"12345678")[:-8] + b"123456789012\n"
    if command == "CLOSE?":
        return False
    return None


@pytest.fixture
def server(scripted_server):
    return scripted_server(instrument)


@pytest.fixture
def transport(server):
    opened = open_visa(server.resource, timeout_s=TIMEOUT_S)
    yield opened
    opened.close()


def test_open_asks_idn_and_queries_work(transport, server) -> None:
    assert isinstance(transport, Transport)
    assert server.received == [PROBE]
    assert transport.query("FAST?") == "fast"
    transport.write("OUTP OFF")
    assert transport.query("FAST?") == "fast"
    assert server.received[-2:] == ["OUTP OFF", "FAST?"]  # FAST? was answered: both arrived


def test_block_with_lf_bytes_in_payload_reads_fast_and_stays_in_step(transport) -> None:
    transport.query_block("BLOCK?")  # warm up
    start = time.perf_counter()
    values = transport.query_block("BLOCK?")
    elapsed = time.perf_counter() - start
    np.testing.assert_array_equal(values[: LF_RICH.size], LF_RICH)
    np.testing.assert_array_equal(values[LF_RICH.size :], [0.0, 1.0, 2.0])
    assert transport.query("FAST?") == "fast"
    # SCPI.md 1.5 [measured]: 0.4-0.8 ms with the termchar off vs 2.5-3 ms for 130 LF reads;
    # here 40 000 LF bytes would be 40 000 reads (about 0.2 s). Loose bound for a noisy VM.
    assert elapsed < 0.05


def test_big_endian_block(transport) -> None:
    values = transport.query_block("BLOCK:BE?", big_endian=True)
    np.testing.assert_allclose(values, [1e-3, 2e-3], rtol=1e-7)


def test_a_block_longer_than_declared_is_refused_then_resynchronised(transport) -> None:
    with pytest.raises(ReplyError, match="followed by LF") as caught:
        transport.query_block("BLOCK:LONG?")
    assert caught.value.command == "BLOCK:LONG?"
    assert transport.query("FAST?") == "fast"


@pytest.mark.robustness
def test_a_late_reply_is_never_read_as_the_next_answer(transport, server) -> None:
    # SCPI.md 0 item 3 [measured]: without resync every later query stays one reply behind.
    start = time.monotonic()
    with pytest.raises(InstrumentTimeout, match="SLOW") as caught:
        transport.query("SLOW?")
    assert TIMEOUT_S * 0.9 < time.monotonic() - start < TIMEOUT_S * 2
    assert isinstance(caught.value, TimeoutError)
    assert transport.query("FAST?") == "fast"
    assert transport.query("FAST?") == "fast"
    assert server.received[-4:] == ["SLOW?", PROBE, "FAST?", "FAST?"]


@pytest.mark.robustness
def test_connection_refused_shows_on_open(free_port: int) -> None:
    # SCPI.md 0 item 5 [measured]: the open succeeds, the first write is refused.
    start = time.monotonic()
    with pytest.raises(InstrumentDisconnected, match="refused"):
        open_visa(f"TCPIP0::127.0.0.1::{free_port}::SOCKET", timeout_s=1.0)
    assert time.monotonic() - start < 0.5


@pytest.mark.robustness
def test_server_closing_mid_query_is_reported_at_once(transport) -> None:
    # SCPI.md 1.4 [measured]: pyvisa-py alone spins for the whole timeout, then reports a timeout.
    transport.timeout_s = 2.0
    start = time.monotonic()
    with pytest.raises(InstrumentDisconnected, match="closed the connection"):
        transport.query("CLOSE?")
    assert time.monotonic() - start < 0.5
    start = time.monotonic()
    with pytest.raises(InstrumentDisconnected):
        transport.write("OUTP OFF")
    assert time.monotonic() - start < 0.1


@pytest.mark.robustness
def test_half_reply_then_close_costs_one_timeout_not_two(scripted_server) -> None:
    replies = iter([IDN, b"+1.23", False])
    server = scripted_server(lambda command: next(replies))
    transport = open_visa(server.resource, timeout_s=TIMEOUT_S)
    try:
        transport.write("HALF")  # the server's reply to this one is the half line
        start = time.monotonic()
        with pytest.raises(InstrumentDisconnected):
            transport.query("CLOSE?")
        assert time.monotonic() - start < TIMEOUT_S * 1.6
    finally:
        transport.close()


def test_io_after_close_is_a_disconnect(server) -> None:
    transport = open_visa(server.resource, timeout_s=TIMEOUT_S)
    transport.close()
    transport.close()  # closing twice is harmless
    with pytest.raises(InstrumentDisconnected, match="closed"):
        transport.query("FAST?")


@pytest.mark.parametrize("timeout_s", [None, math.inf, 0.0, -1.0, math.nan])
def test_open_refuses_an_infinite_or_empty_timeout(timeout_s) -> None:
    # SCPI.md 0 item 4 [measured]: timeout=None hangs forever at 100 % CPU on a closed peer.
    with pytest.raises(ValueError, match="finite"):
        open_visa("TCPIP0::127.0.0.1::1::SOCKET", timeout_s=timeout_s)


@pytest.mark.parametrize(
    "resource", ["TCPIP0::127.0.0.1::5025::socket", "NOT-A-RESOURCE", "TCPIP0::[::1]::5025::SOCKET"]
)
def test_bad_resource_strings_say_how_to_write_one(resource: str) -> None:
    # SCPI.md 1.2 and 4 [measured]: lower-case classes and IPv6 literals do not parse.
    with pytest.raises(InstrumentError, match="SOCKET and INSTR in upper case"):
        open_visa(resource, timeout_s=0.5)


def test_timeout_can_be_changed_but_not_to_infinity(transport) -> None:
    transport.timeout_s = 1.5
    assert transport.timeout_s == 1.5
    with pytest.raises(ValueError):
        transport.timeout_s = math.inf
    assert transport.timeout_s == 1.5


@pytest.mark.parametrize(  # the grammar's examples, SCPI.md section 4 [D, pyvisa names]
    "resource",
    [
        "TCPIP::127.0.0.1::5025::SOCKET",
        "TCPIP0::192.0.2.17::5025::SOCKET",
        "TCPIP0::smu-b2.lab.example::5025::SOCKET",
        "TCPIP::10.0.0.5::INSTR",
        "TCPIP0::host::hislip0,4880::INSTR",
        "ASRL1::INSTR",
        "ASRL/dev/ttyUSB0::INSTR",
        "GPIB0::24::3::INSTR",
        "USB0::0x1234::0x5678::SN001::INSTR",
    ],
)
def test_resource_strings_of_every_kind_pass_the_check(resource: str) -> None:
    assert resource_problem(resource) == ""


@pytest.mark.parametrize(
    "resource",
    ["", "   ", "sim", "%%%not::a::resource", "12345", "TCPIP0::127.0.0.1::5025::socket",
     "TCPIP0::256.0.0.1::5025::SOCKET", "TCPIP0::1.2.3.4::0::SOCKET",
     "TCPIP0::1.2.3.4::http::SOCKET", "TCPIP0::bad_host!::5025::SOCKET",
     "TCPIP0::127.0.0.1::5025"],
)  # fmt: skip
def test_text_that_cannot_name_an_instrument_is_refused_before_opening(resource: str) -> None:
    assert resource_problem(resource)
    with pytest.raises(InstrumentError, match="SOCKET and INSTR in upper case"):
        open_visa(resource, timeout_s=0.5)
