"""Transports without a wire: an in-process loop for unit tests, and a spy that records exchanges.

Both satisfy `instruments.protocol.Transport`. They carry the same SCPI
text a VISA connection would, so a driver tested through them is the driver that runs.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from datetime import UTC, datetime
from typing import TextIO, TypeVar

import numpy as np

from instruments.errors import (
    InstrumentDisconnected,
    InstrumentError,
    InstrumentTimeout,
    ReplyError,
)
from instruments.protocol import Transport
from instruments.scpi import check_message, parse_block

log = logging.getLogger(__name__)
T = TypeVar("T")


class CallableTransport:
    """A transport whose instrument is a function: `handler(message)` returns the reply text
    (no terminator) for a message containing a query, or None for a command.

    A query that gets None raises InstrumentTimeout, as the wire would; a reply to a `write()`
    raises InstrumentError, since on the wire it would be read later as the wrong answer. The
    handler may raise any InstrumentError itself to script a fault. Block replies are the block's
    bytes as latin-1 text.
    """

    def __init__(
        self,
        handler: Callable[[str], str | None],
        resource: str = "loop",
        *,
        timeout_s: float = 2.0,
    ) -> None:
        self.handler = handler
        self.resource = resource
        self.timeout_s = timeout_s
        self.closed = False

    def write(self, message: str) -> None:
        if self._call(message) is not None:
            detail = "the instrument replied to a message sent with write()"
            raise InstrumentError(self.resource, message, detail, hint="send it with query()")

    def query(self, message: str) -> str:
        reply = self._call(message)
        if reply is None:
            raise InstrumentTimeout(self.resource, message, "no reply (the handler gave None)")
        return reply

    def query_block(
        self,
        message: str,
        *,
        datatype: str = "f",
        big_endian: bool = False,
        items: int | None = None,
    ) -> np.ndarray:
        data = self.query(message).encode("latin-1")
        try:
            return parse_block(data, datatype=datatype, big_endian=big_endian, items=items)
        except ReplyError as exc:
            raise ReplyError(self.resource, message, exc.detail) from exc

    def clear(self) -> None:
        self._check_open("<clear>")

    def close(self) -> None:
        self.closed = True

    def _call(self, message: str) -> str | None:
        check_message(message)
        self._check_open(message)
        return self.handler(message)

    def _check_open(self, message: str) -> None:
        if self.closed:
            raise InstrumentDisconnected(self.resource, message, "the connection was closed")


class SpyTransport:
    """Wraps a transport and writes one line per event to `log`, flushed at once:

        <UTC time, ISO 8601, microseconds>\\t<ms since the spy started>\\t>>\\t<message>
        ...\\t<<\\t<reply>          (a block reply: '<block N x dtype> <payload hex>')
        ...\\t!!\\t<ExceptionClass>: <message>   (whenever the inner transport raises)

    The request line is written before the request is made, so a hang or crash still leaves it.
    Text is backslash-escaped to keep one event per line. A failing log file is reported through
    logging and never stops the instrument I/O (an output-off must get through regardless).
    The elapsed column uses a monotonic clock, so intervals stay right if the wall clock jumps.
    """

    def __init__(
        self,
        inner: Transport,
        log: TextIO,
        *,
        wall_clock: Callable[[], float] = time.time,
        clock: Callable[[], float] = time.perf_counter,
    ) -> None:
        self.inner = inner
        self._log = log
        self._wall_clock = wall_clock
        self._clock = clock
        self._start = clock()
        self._log_failed = False

    @property
    def resource(self) -> str:
        return self.inner.resource

    @property
    def timeout_s(self) -> float:
        return self.inner.timeout_s

    @timeout_s.setter
    def timeout_s(self, value: float) -> None:
        self.inner.timeout_s = value

    def write(self, message: str) -> None:
        self._exchange(message, lambda: self.inner.write(message))

    def query(self, message: str) -> str:
        return self._exchange(message, lambda: self.inner.query(message), str)

    def query_block(
        self,
        message: str,
        *,
        datatype: str = "f",
        big_endian: bool = False,
        items: int | None = None,
    ) -> np.ndarray:
        def call() -> np.ndarray:
            return self.inner.query_block(
                message, datatype=datatype, big_endian=big_endian, items=items
            )

        return self._exchange(message, call, _describe_block)

    def clear(self) -> None:
        self._exchange("<clear>", self.inner.clear)

    def close(self) -> None:
        self._exchange("<close>", self.inner.close)

    def _exchange(
        self, request: str, call: Callable[[], T], describe: Callable[[T], str] | None = None
    ) -> T:
        self._line(">>", request)
        try:
            result = call()
        except BaseException as exc:
            self._line("!!", f"{type(exc).__name__}: {exc}")
            raise
        if describe is not None:
            self._line("<<", describe(result))
        return result

    def _line(self, direction: str, text: str) -> None:
        stamp = datetime.fromtimestamp(self._wall_clock(), UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
        elapsed_ms = (self._clock() - self._start) * 1000.0
        escaped = text.encode("unicode_escape").decode("ascii")
        try:
            self._log.write(f"{stamp}\t{elapsed_ms:.3f}\t{direction}\t{escaped}\n")
            self._log.flush()
        except (OSError, ValueError) as exc:  # ValueError: the log file was closed
            if not self._log_failed:
                log.warning("SCPI spy log cannot be written (%s); I/O goes on unlogged", exc)
            self._log_failed = True


def _describe_block(values: np.ndarray) -> str:
    return f"<block {values.size} x {values.dtype.str}> {values.tobytes().hex()}"
