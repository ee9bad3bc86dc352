"""The one interface a driver sees: `Transport`. No pyvisa here, so that drivers, loopbacks and
tests can be imported without the VISA stack; `instruments.transport` implements it over pyvisa.
"""

from __future__ import annotations

import math
from typing import Protocol, runtime_checkable

import numpy as np

# IEEE 488.2 makes *IDN? mandatory, so it is the one query every instrument can answer: the probe
# that tells a fresh reply from a stale one when resynchronising.
PROBE = "*IDN?"
# Line terminators by the names dialects and stations use (IEEE 488.2 ends messages in NL; some
# instruments, serial ones most often, use CR or CR LF).
TERMINATORS = {"LF": "\n", "CR": "\r", "CRLF": "\r\n"}


@runtime_checkable
class Transport(Protocol):
    """What a driver may do with an instrument connection. Messages carry no terminator.

    `resource` is the resource string; `timeout_s` the reply timeout in seconds (finite, > 0).
    `query_block` reads one IEEE 488.2 block; `items` is how many values it must hold, which an
    indefinite block (#0) needs (it carries no length).
    """

    @property
    def resource(self) -> str: ...

    @property
    def timeout_s(self) -> float: ...

    @timeout_s.setter
    def timeout_s(self, value: float) -> None: ...

    def write(self, message: str) -> None: ...

    def query(self, message: str) -> str: ...

    def query_block(
        self,
        message: str,
        *,
        datatype: str = "f",
        big_endian: bool = False,
        items: int | None = None,
    ) -> np.ndarray: ...

    def clear(self) -> None: ...

    def close(self) -> None: ...


def check_timeout(timeout_s: float) -> float:
    """The timeout if finite and positive; an infinite one would hang pyvisa-py at 100 % CPU."""
    if timeout_s is None or not math.isfinite(timeout_s) or timeout_s <= 0:
        raise ValueError(f"timeout must be a finite number of seconds > 0 (got {timeout_s!r})")
    return float(timeout_s)
