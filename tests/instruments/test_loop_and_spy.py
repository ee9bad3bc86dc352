"""CallableTransport (in-process) and SpyTransport (the exchange log)."""

from __future__ import annotations

import io
import logging
import re

import numpy as np
import pytest

from instruments.errors import InstrumentDisconnected, InstrumentError, InstrumentTimeout
from instruments.loopback import CallableTransport, SpyTransport
from instruments.protocol import Transport
from instruments.scpi import make_block

LINE = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{6}Z\t\d+\.\d{3}\t(>>|<<|!!)\t.*")


def echo(message: str) -> str | None:
    return f"got {message}" if "?" in message else None


class FakeClocks:
    """Wall clock from 2001-01-01T00:00:00Z; both clocks step 1.5 ms per reading."""

    def __init__(self) -> None:
        self.ticks = 0

    def wall(self) -> float:
        return 978307200.0 + self.ticks * 0.0015

    def mono(self) -> float:
        self.ticks += 1
        return self.ticks * 0.0015


def test_callable_transport_passes_the_text_through() -> None:
    loop = CallableTransport(echo)
    assert isinstance(loop, Transport)
    assert loop.query("MEAS:CURR?") == "got MEAS:CURR?"
    loop.write("OUTP ON")


def test_callable_transport_faults_look_like_the_wire() -> None:
    loop = CallableTransport(lambda message: None)
    with pytest.raises(InstrumentTimeout):
        loop.query("OUTP?")
    with pytest.raises(InstrumentError, match="query"):
        CallableTransport(echo).write("OUTP?")  # an unread reply would desynchronise the wire
    with pytest.raises(ValueError, match="newline"):
        loop.write("OUTP ON\n")
    loop.close()
    with pytest.raises(InstrumentDisconnected):
        loop.write("OUTP OFF")


def test_callable_transport_blocks() -> None:
    payload = np.array([1.0, 10.0], dtype="<f4").tobytes()  # 10.0f contains no LF, 1.0f neither
    loop = CallableTransport(lambda m: make_block(payload).decode("latin-1"))
    np.testing.assert_array_equal(loop.query_block("DATA?"), [1.0, 10.0])


def test_spy_log_format_with_fake_clocks() -> None:
    clocks = FakeClocks()
    log = io.StringIO()
    spy = SpyTransport(CallableTransport(echo), log, wall_clock=clocks.wall, clock=clocks.mono)
    assert isinstance(spy, Transport)
    spy.write("OUTP ON")
    assert spy.query("OUTP?") == "got OUTP?"
    assert log.getvalue().splitlines() == [
        "2001-01-01T00:00:00.001500Z\t1.500\t>>\tOUTP ON",
        "2001-01-01T00:00:00.003000Z\t3.000\t>>\tOUTP?",
        "2001-01-01T00:00:00.004500Z\t4.500\t<<\tgot OUTP?",
    ]


def test_spy_keeps_the_request_and_logs_the_exception_class() -> None:
    log = io.StringIO()
    spy = SpyTransport(CallableTransport(lambda message: None), log)
    with pytest.raises(InstrumentTimeout):
        spy.query("READ?")
    lines = log.getvalue().splitlines()
    assert all(LINE.fullmatch(line) for line in lines), lines
    assert lines[0].endswith("\t>>\tREAD?")
    assert "\t!!\tInstrumentTimeout: no reply" in lines[1]


def test_spy_keeps_one_event_per_line() -> None:
    log = io.StringIO()
    spy = SpyTransport(CallableTransport(lambda message: "two\nlines\ttab"), log)
    spy.query("X?")
    assert log.getvalue().splitlines()[1].endswith("\t<<\ttwo\\nlines\\ttab")


def test_spy_logs_blocks_as_their_bytes() -> None:
    payload = np.array([1.0, -2.0], dtype="<f4").tobytes()
    log = io.StringIO()
    spy = SpyTransport(CallableTransport(lambda m: make_block(payload).decode("latin-1")), log)
    spy.query_block("DATA?")
    assert log.getvalue().splitlines()[1].endswith(f"\t<<\t<block 2 x <f4> {payload.hex()}")


def test_spy_with_a_broken_log_still_does_the_io(caplog) -> None:
    sent: list[str] = []
    log = io.StringIO()
    log.close()
    spy = SpyTransport(CallableTransport(lambda m: sent.append(m)), log)
    with caplog.at_level(logging.WARNING, logger="instruments.loopback"):
        spy.write("OUTP OFF")
        spy.write("SOUR:VOLT 0")
    assert sent == ["OUTP OFF", "SOUR:VOLT 0"]
    assert len(caplog.records) == 1  # said once, not per line


def test_spy_forwards_timeout_and_resource() -> None:
    inner = CallableTransport(echo, resource="loop7")
    spy = SpyTransport(inner, io.StringIO())
    spy.timeout_s = 0.5
    assert (spy.resource, inner.timeout_s) == ("loop7", 0.5)
