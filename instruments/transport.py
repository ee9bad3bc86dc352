"""Transports: how SCPI text reaches an instrument. The only module that imports pyvisa.

A driver sees the small `Transport` protocol and nothing else. `open_visa` opens any VISA resource
through pyvisa's pure-Python backend and turns everything pyvisa, the OS or pyserial can raise into
our typed errors at one chokepoint (`VisaTransport._mapped`). The protocol itself lives in
`instruments.protocol` (no pyvisa); two more transports live in `instruments.loopback`: an
in-process one for unit tests and a spy that records every exchange.

pyvisa-py facts this module works around (measured, see SCPI.md):
- a reply's timeout restarts with every chunk that arrives (pyvisa-py checks its deadline only when
  a wait for data ends empty), so a reply dribbled a byte at a time never times out: the transport
  reads a reply into pyvisa-py's buffer itself, against one deadline for the whole reply, and
  pyvisa-py then finds it complete there (`_fill_line`, `_fill_bytes`);
- a late reply after a timeout would be read as the answer to the next query, for good: after a
  timeout the transport is marked out of step and resynchronised before its next query (drain,
  then *IDN? on the same link, waiting up to RESYNC_WAIT_S for its answer behind any late ones:
  the same link keeps every command sent meanwhile in order);
- a peer that closed the socket looks like a slow instrument (the read spins until the timeout):
  a query first waits for the socket itself and peeks, so a closed peer is reported at once;
- a refused connection opens fine and only fails on the first write: `open_visa` asks `*IDN?`;
- a connect that times out is reported as a bare status number (-1073807339): `_unreached` says
  in words what did not answer where.
"""

from __future__ import annotations

import errno
import functools
import ipaddress
import logging
import re
import select
import socket
import time
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from typing import Any

import numpy as np
import pyvisa
from pyvisa import constants, rname
from pyvisa import errors as visa_errors

from instruments.errors import (
    InstrumentDisconnected,
    InstrumentError,
    InstrumentTimeout,
    ReplyError,
)
from instruments.protocol import PROBE, TERMINATORS, Transport, check_timeout
from instruments.scpi import (
    block_dtype,
    check_message,
    decode_payload,
    parse_block_header,
    reply_error,
)

try:  # pyserial is an optional extra of pyvisa-py; without it there are no ASRL resources
    import serial

    _SERIAL_TIMEOUTS: tuple[type[Exception], ...] = (serial.SerialTimeoutException,)
    _SERIAL_ERRORS: tuple[type[Exception], ...] = (serial.SerialException,)
except ImportError:  # pragma: no cover - pyserial is installed in development
    _SERIAL_TIMEOUTS = _SERIAL_ERRORS = ()

log = logging.getLogger(__name__)

_QUIET_S = 0.1  # silence that ends a drain (what pyvisa-py's clear() waits for, too)
_MAX_STALE = 4  # late replies discarded while resynchronising before giving up
# The longest reply line taken: a 100,000-point list of three fields is about 5 MB; beyond this a
# reply is runaway output, refused before it fills memory.
MAX_LINE_BYTES = 16 * 1024 * 1024
RESYNC_WAIT_S = 5.0  # how long a resync waits for its probe's answer (at least the timeout)


@functools.cache
def _cached_manager(library: str) -> pyvisa.ResourceManager:
    # One manager per VISA library for the process: closing a manager closes every resource
    # it opened.
    return pyvisa.ResourceManager(library)


def _resource_manager(library: str = "@py") -> pyvisa.ResourceManager:
    # pyvisa hands every caller the same manager object, so anyone's rm.close() closes ours
    # too (measured, pyvisa 1.16.2): open a fresh one then instead of failing every open.
    manager = _cached_manager(library)
    try:
        manager.session  # noqa: B018 - the property raises once the manager is closed
    except visa_errors.InvalidSession:
        _cached_manager.cache_clear()
        manager = _cached_manager(library)
    return manager


# Serial line settings by the words a station file uses (sequencer/recipe/linkspec.py).
_PARITY = {p.name: p for p in constants.Parity}
_STOP_BITS = {1: constants.StopBits.one, 1.5: constants.StopBits.one_and_a_half}
_STOP_BITS[2] = constants.StopBits.two
_FLOW = {"none": constants.VI_ASRL_FLOW_NONE, "xon_xoff": constants.VI_ASRL_FLOW_XON_XOFF}
_FLOW |= {"rts_cts": constants.VI_ASRL_FLOW_RTS_CTS, "dtr_dsr": constants.VI_ASRL_FLOW_DTR_DSR}


def _serial_options(serial: Mapping[str, Any] | None) -> dict[str, Any]:
    if not serial:
        return {}
    return {
        "baud_rate": int(serial.get("baud", 9600)),
        "data_bits": int(serial.get("data_bits", 8)),
        "parity": _PARITY[serial.get("parity", "none")],
        "stop_bits": _STOP_BITS[serial.get("stop_bits", 1)],
        "flow_control": _FLOW[serial.get("flow_control", "none")],
    }


def open_visa(
    resource: str,
    *,
    timeout_s: float = 2.0,
    probe: str | None = PROBE,
    read_termination: str = "\n",
    write_termination: str = "\n",
    visa_library: str = "@py",
    serial: Mapping[str, Any] | None = None,
) -> VisaTransport:
    """Open `resource` (e.g. 'TCPIP0::127.0.0.1::5025::SOCKET') and check that it answers
    `probe` (*IDN? by default; the query whose constant answer also resynchronises the link).
    With `probe` None the instrument is asked nothing: the link is only checked for a refused
    connection, and a resynchronisation can only drain the input until it is quiet.
    `visa_library`: pyvisa's backend ("@py", or the path of an installed VISA library);
    `serial`: line settings for an ASRL resource (baud, data_bits, parity, stop_bits,
    flow_control as words, and echo: the instrument sends each command back first)."""
    millis = round(check_timeout(timeout_s) * 1000)
    problem = resource_problem(resource)
    if problem:
        raise InstrumentError(resource, None, f"the resource {problem}", hint=RESOURCE_HINT)
    for text in (read_termination, write_termination):
        if text not in TERMINATORS.values():
            raise ValueError(f"a line terminator is LF, CR or CRLF (got {text!r})")
    try:
        manager = _resource_manager(visa_library)
    except Exception as exc:  # pyvisa raises OSError, ValueError or its own for a bad library
        detail = f"the VISA library {visa_library!r} cannot be loaded ({exc})"
        hint = "leave visa_library out (the pure-Python @py), or give an installed library's path"
        raise InstrumentError(resource, None, detail, hint=hint) from exc
    try:
        inst = manager.open_resource(
            resource,
            read_termination=read_termination,
            write_termination=write_termination,
            timeout=millis,
            open_timeout=millis,
            **(_serial_options(serial) if resource.upper().startswith("ASRL") else {}),
        )
    except Exception as exc:  # pyvisa-py raises a bare Exception when a connect fails
        raise _open_error(resource, exc, timeout_s) from exc
    transport = VisaTransport(inst, resource, timeout_s, read_termination, write_termination)
    transport.echo = bool(serial and serial.get("echo"))
    try:
        transport.learn_probe(probe)
    except BaseException:
        transport.close()
        raise
    return transport


RESOURCE_HINT = "write it like TCPIP0::192.0.2.17::5025::SOCKET (SOCKET and INSTR in upper case)"
_HOST_LABEL = re.compile(r"[A-Za-z0-9]([A-Za-z0-9-]{0,61}[A-Za-z0-9])?")  # RFC 1123 host names


def resource_problem(resource: str) -> str:
    """Why `resource` cannot name an instrument ('' when it can): pyvisa's own grammar, then the
    host and port a TCP resource needs. Reads the text only; nothing is opened."""
    if not resource.strip():
        return "is empty"
    try:
        parsed = rname.parse_resource_name(resource)
    except rname.InvalidResourceName as exc:
        return f"is not a VISA resource string ({_parse_why(exc)})"
    host = getattr(parsed, "host_address", None)
    if isinstance(host, str) and _host_problem(host):
        return _host_problem(host)
    port = getattr(parsed, "port", None)
    if isinstance(parsed, rname.TCPIPSocket) and not _is_port(port):
        return f"has the port {port!r}; a TCP port is a whole number from 1 to 65535"
    device = getattr(parsed, "lan_device_name", "")
    if isinstance(parsed, rname.TCPIPInstr) and device.isdigit():
        return f"names the LAN device {device}, which looks like a port (a socket ends in ::SOCKET)"
    return ""


def _parse_why(exc: Exception) -> str:
    text = str(exc)
    if "The syntax is" in text:
        return "the syntax is" + text.split("The syntax is", 1)[1].rstrip(".")
    return text.rpartition(": ")[2] or text


def _host_problem(host: str) -> str:
    if all(c.isdigit() or c == "." for c in host):
        try:
            ipaddress.IPv4Address(host)
        except ValueError:
            return f"has the host {host!r}, which is not an IPv4 address"
        return ""
    labels = host.rstrip(".").split(".")
    if len(host) > 253 or not all(_HOST_LABEL.fullmatch(label) for label in labels):
        return f"has the host {host!r}, which is neither an IPv4 address nor a host name"
    return ""


def _is_port(port: object) -> bool:
    return isinstance(port, str) and port.isdigit() and 1 <= int(port) <= 65535


def _open_error(resource: str, exc: Exception, timeout_s: float) -> InstrumentError:
    if isinstance(exc, rname.InvalidResourceName):
        detail = f"not a valid resource string: {exc}"
        return InstrumentError(resource, None, detail, hint=RESOURCE_HINT)
    if isinstance(exc, ValueError):  # GPIB/USB without drivers, or a resource class in lower case
        detail = f"cannot open this kind of resource: {exc}"
        hint = f"install its driver, or {RESOURCE_HINT}"
        return InstrumentError(resource, None, detail, hint=hint)
    return InstrumentDisconnected(resource, None, _unreached(resource, exc, timeout_s))


def _where(resource: str) -> str:
    """The address a resource string points at, in words: '192.0.2.17 port 5025'."""
    try:
        parsed = rname.parse_resource_name(resource)
    except rname.InvalidResourceName:
        return resource
    host, port = getattr(parsed, "host_address", None), getattr(parsed, "port", None)
    if host is None:
        return resource
    return f"{host} port {port}" if isinstance(parsed, rname.TCPIPSocket) else host


_STATUS = re.compile(r"-?\b\d{9,10}\b")  # a VISA status code: 32-bit, errors negative
_ERRNO = re.compile(r"\[Errno (-?\d+)\] ?(.*)")
_ERRNO_WORDS = {  # what a failed connect's errno means at the bench
    errno.ECONNREFUSED: "connection refused: the address answers, but nothing listens on that port",
    errno.ENETUNREACH: "network unreachable: no route from this computer to that address",
    errno.EHOSTUNREACH: "host unreachable: no route from this computer to that address",
    errno.ETIMEDOUT: "no answer at all: the address may be wrong or the instrument off",
}
_NAME_ERRNOS = {  # the host name itself failed: nothing was asked to answer
    socket.EAI_NONAME: "is not a known host name",
    socket.EAI_AGAIN: "could not be looked up (the name service did not answer)",
}


def _unreached(resource: str, exc: Exception, timeout_s: float) -> str:
    """What a failed open means, in words, instead of a status number or errno."""
    text = str(exc).removeprefix("could not connect: ")
    code, said = _errno_of(exc, text)
    if code in _NAME_ERRNOS:
        host = _where(resource).partition(" port ")[0]
        return f"{host} {_NAME_ERRNOS[code]}: check its spelling, or give its IPv4 address"
    if code is not None:
        return f"nothing answered at {_where(resource)} ({_ERRNO_WORDS.get(code, said)})"
    status = _STATUS.search(text)
    if status and int(status.group()) == constants.StatusCode.error_timeout:
        return (
            f"nothing answered at {_where(resource)} within {timeout_s:g} s (no connection was "
            "made: the address may be wrong, the instrument off or unplugged, or a firewall "
            "in between)"
        )
    if status and int(status.group()) in _VISA_WORDS:
        abbreviation, description = _VISA_WORDS[int(status.group())]
        return f"could not connect to {_where(resource)}: {description} ({abbreviation})"
    return f"could not connect to {_where(resource)}: {text}"


def _errno_of(exc: Exception, text: str) -> tuple[int | None, str]:
    if isinstance(exc, OSError) and exc.errno is not None:
        return exc.errno, exc.strerror or text
    found = _ERRNO.search(text)  # pyvisa-py wraps the OSError's text in a bare Exception
    return (int(found.group(1)), found.group(2)) if found else (None, text)


_VISA_WORDS = {int(k): words for k, words in visa_errors.completion_and_error_messages.items()}


class VisaTransport:
    """A Transport over a pyvisa message-based resource; use `open_visa` to make one."""

    def __init__(
        self,
        inst: Any,
        resource: str,
        timeout_s: float,
        read_termination: str = "\n",
        write_termination: str = "\n",
    ) -> None:
        self._inst = inst
        self.resource = resource
        # pyvisa ends a read at the last character of the read termination (SCPI.md 1.2)
        self._end = read_termination.encode()[-1:]
        self._read_term = read_termination.encode()
        self._write_term = write_termination
        self._probe: str | None = PROBE
        self.echo = False  # the instrument sends every command back before anything else
        self._timeout_s = check_timeout(timeout_s)
        self._session = _pyvisa_py_session(inst)
        self._socket = _tcp_socket(self._session)
        if self._socket is not None:
            # pyvisa-py leaves Nagle on and cannot set VI_ATTR_TCPIP_NODELAY (SCPI.md 1.8). A
            # command followed by a query then waits for the peer's delayed ACK: about 40 ms a
            # point, measured here. Setting the option on its socket removes the stall.
            self._socket.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self._probe_reply: str | None = None
        self._probes_out = 0  # probes sent whose answers have not been read yet
        self._out_of_step = False
        self._closed = False

    @property
    def timeout_s(self) -> float:
        return self._timeout_s

    @timeout_s.setter
    def timeout_s(self, value: float) -> None:
        self._timeout_s = check_timeout(value)
        with self._mapped(None):
            self._inst.timeout = round(self._timeout_s * 1000)

    def learn_probe(self, probe: str | None = PROBE) -> str | None:
        """Ask `probe` once (also proves the connection) and remember its answer for
        resynchronising; None: ask nothing, only check that the link was not refused."""
        self._probe = probe
        if probe is None:
            with self._mapped(None):
                self._check_alive(None)
            return None
        self._probe_reply = self.query(probe)
        return self._probe_reply

    def write(self, message: str) -> None:
        check_message(message)
        if any(c in message for c in self._write_term):
            raise ValueError(f"SCPI message {message!r} must not contain its line terminator")
        with self._mapped(message):
            self._check_alive(message)
            self._inst.write(message)
            if self.echo:
                self._take_echo(message)

    def _take_echo(self, message: str) -> None:
        """Read the instrument's echo of `message`; anything else means the stream is out of
        step (refused, never read as a reply)."""
        echoed = self._read(message)
        if echoed.strip() != message:
            raise reply_error(echoed[:60], f"the echo of {message[:60]!r}")

    def query(self, message: str) -> str:
        self.write(self._in_step(message))
        with self._mapped(message):
            return self._read(message)

    def query_block(
        self,
        message: str,
        *,
        datatype: str = "f",
        big_endian: bool = False,
        items: int | None = None,
    ) -> np.ndarray:
        dtype = block_dtype(datatype, big_endian)
        self.write(self._in_step(message))
        with self._mapped(message):
            return self._read_block(message, dtype, time.monotonic() + self._timeout_s, items)

    def clear(self) -> None:
        """Drop everything the instrument sent and nobody read, then check the stream is in step."""
        with self._mapped("<clear>"):
            self._check_alive("<clear>")
            self._out_of_step = True
            self._resync("<clear>")

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        try:
            self._inst.close()
        except Exception as exc:  # the connection may be broken already; closing must not fail
            log.debug("closing %s: %r", self.resource, exc)

    # -- internals -------------------------------------------------------------------------

    @contextmanager
    def _mapped(self, command: str | None) -> Iterator[None]:
        """The chokepoint: every exception from pyvisa, the OS or pyserial becomes ours here."""
        try:
            yield
        except ReplyError as exc:
            self._out_of_step = True  # the rest of a bad reply may still be on its way
            if exc.resource:
                raise
            raise ReplyError(self.resource, command, exc.detail) from exc
        except InstrumentError:
            raise
        except visa_errors.VisaIOError as exc:
            if exc.error_code == constants.StatusCode.error_timeout:
                raise self._after_timeout(command) from exc
            detail = f"VISA I/O error {exc.abbreviation}: {exc.description}"
            raise InstrumentError(self.resource, command, detail) from exc
        except visa_errors.InvalidSession as exc:
            raise InstrumentDisconnected(self.resource, command, "the session is closed") from exc
        except _SERIAL_TIMEOUTS as exc:
            detail = f"serial write timed out: {exc}"
            raise InstrumentTimeout(self.resource, command, detail) from exc
        except (ConnectionError, *_SERIAL_ERRORS) as exc:
            detail = f"connection lost ({type(exc).__name__}: {exc})"
            raise InstrumentDisconnected(self.resource, command, detail) from exc
        except OSError as exc:
            raise InstrumentError(self.resource, command, f"I/O error: {exc}") from exc
        except ValueError as exc:  # undecodable bytes, pyvisa's own parse errors
            self._out_of_step = True
            raise ReplyError(self.resource, command, f"unreadable reply: {exc}") from exc
        except BaseException:  # Ctrl-C or a signal mid-exchange: its reply may still come
            self._out_of_step = True
            raise

    def _after_timeout(self, command: str | None) -> InstrumentError:
        lost = self._link_lost()
        if lost:
            return InstrumentDisconnected(self.resource, command, lost)
        self._out_of_step = True
        detail = f"no complete reply within {self._timeout_s:g} s"
        return InstrumentTimeout(self.resource, command, detail)

    def _check_alive(self, command: str | None) -> None:
        if self._closed:
            raise InstrumentDisconnected(self.resource, command, "the connection was closed")
        lost = self._link_lost()  # else the first write to a closed peer succeeds silently
        if lost:
            raise InstrumentDisconnected(self.resource, command, lost)

    def _in_step(self, message: str) -> str:
        """Resynchronise first if a reply went missing; returns the message to send next."""
        check_message(message)
        if self._out_of_step:
            with self._mapped(message):
                self._check_alive(message)
                self._resync(message)
        return message

    def _read(self, command: str, wait_s: float | None = None) -> str:
        """One reply line, complete within `wait_s` (the timeout) from now, however it comes."""
        deadline = time.monotonic() + (self._timeout_s if wait_s is None else wait_s)
        self._fill_line(command, deadline)
        return self._inst.read().removesuffix("\r")

    def _fill_line(self, command: str, deadline: float) -> None:
        """Read until pyvisa-py's buffer holds a whole line (its own read then ends at once)."""
        if self._socket is None or self._end in self._session._pending_buffer:
            return  # not a socket: pyvisa's own timeout, which restarts with each chunk
        while self._end not in self._more(command, deadline):
            if len(self._session._pending_buffer) > MAX_LINE_BYTES:
                self._session._pending_buffer.clear()
                detail = f"a reply of more than {MAX_LINE_BYTES:,} bytes with no end of line"
                raise ReplyError(self.resource, command, detail)

    def _fill_bytes(self, command: str, deadline: float, count: int) -> None:
        """Read until pyvisa-py's buffer holds `count` bytes."""
        if self._socket is None:
            return
        while len(self._session._pending_buffer) < count:
            self._more(command, deadline)

    def _more(self, command: str, deadline: float) -> bytes:
        """The next chunk from the socket, into pyvisa-py's buffer; a timeout at `deadline`, a
        closed peer at once (pyvisa-py alone would spin until the timeout)."""
        assert self._socket is not None
        left = deadline - time.monotonic()
        if left <= 0 or not select.select([self._socket], [], [], left)[0]:
            raise self._after_timeout(command)
        chunk = self._socket.recv(65536)
        if not chunk:
            raise InstrumentDisconnected(
                self.resource, command, "the instrument closed the connection"
            )
        self._session._pending_buffer.extend(chunk)
        return chunk

    def _link_lost(self) -> str | None:
        """Why the TCP link is gone, or None while it looks alive (a peek, never a wait)."""
        if self._socket is None:
            return None
        try:
            if self._socket.recv(1, socket.MSG_PEEK | socket.MSG_DONTWAIT) == b"":
                return "the instrument closed the connection"
        except BlockingIOError:
            return None  # alive, nothing pending
        except ConnectionRefusedError:
            refused = _ERRNO_WORDS[errno.ECONNREFUSED]
            return f"nothing answered at {_where(self.resource)} ({refused})"
        except OSError as exc:  # reset, or our own socket closed
            return f"connection lost ({exc.strerror or exc})"
        return None

    def _read_block(
        self, command: str, dtype: np.dtype, deadline: float, items: int | None
    ) -> np.ndarray:
        # Reads the payload with the termchar off, so LF bytes in it do not cost a read each.
        # An indefinite block (#0) has no length and, on a socket, no END: it is read as the
        # `items` values the caller expects, and must then end with the terminator.
        self._fill_bytes(command, deadline, 2)
        head = self._inst.read_bytes(2)
        digits = int(head[1:2]) if head[:1] == b"#" and head[1:2].isdigit() else 0
        self._fill_bytes(command, deadline, digits)
        length_text = self._inst.read_bytes(digits) if digits else b""
        _, length = parse_block_header(head + length_text, items=items, itemsize=dtype.itemsize)
        tail = len(self._read_term)
        self._fill_bytes(command, deadline, length + tail)
        attribute = constants.ResourceAttribute.termchar_enabled
        self._inst.set_visa_attribute(attribute, constants.VI_FALSE)
        try:
            payload = self._inst.read_bytes(length + tail)
        finally:
            self._inst.set_visa_attribute(attribute, constants.VI_TRUE)
        if payload[-tail:] != self._read_term:
            ended = {b"\n": "LF", b"\r": "CR", b"\r\n": "CRLF"}[self._read_term]
            expected = f"a block of the expected length followed by {ended}"
            raise reply_error(f"<block ending {payload[-6:]!r}>", expected)
        return decode_payload(payload[:-tail], dtype)

    def _resync(self, command: str) -> None:
        self._drain(command)
        if self._probe_reply is not None and self._probe is not None:
            self._inst.write(self._probe)
            self._probes_out += 1
            self._await_probes(command)
        self._out_of_step = False

    def _await_probes(self, command: str) -> None:
        """Read until every probe sent is answered, dropping late replies; a probe that timed
        out stays counted, so that its answer is never taken for a later query's reply."""
        deadline = time.monotonic() + max(self._timeout_s, RESYNC_WAIT_S)
        stale = 0
        while self._probes_out:
            reply = self._read(self._probe or PROBE, max(deadline - time.monotonic(), 1e-3))
            if reply == self._probe_reply:
                self._probes_out -= 1
                continue
            if self.echo and reply == self._probe:
                continue  # the echo of the probe itself
            log.warning("%s: discarded a late reply %r", self.resource, reply)
            stale += 1
            if stale >= _MAX_STALE:
                detail = f"still out of step after discarding {_MAX_STALE} late replies"
                hint = "reconnect to the instrument"
                raise InstrumentError(self.resource, command, detail, hint=hint)

    def _drain_other(self, command: str) -> None:
        """Not a socket: a device clear where the interface has one; a serial line has none
        in pyvisa-py (VI_ERROR_NSUP_OPER), so its input is read and dropped until quiet."""
        try:
            self._inst.clear()
        except visa_errors.VisaIOError as exc:
            if exc.error_code != constants.StatusCode.error_nonsupported_operation:
                raise
            limit_s = max(self._timeout_s, RESYNC_WAIT_S)
            dropped = _read_until_quiet(self._inst, _QUIET_S, limit_s)
            self._count_answered(dropped)

    def _drain(self, command: str) -> None:
        """Read and drop input until it has been quiet for 0.1 s (for at most RESYNC_WAIT_S)."""
        if self._socket is None:
            self._drain_other(command)
            return
        dropped = bytearray(self._session._pending_buffer)  # grows in place: drains can be long
        self._session._pending_buffer.clear()
        # A reply still dribbling in when its query timed out is drained to its end, within
        # the time a resync may take, like a late one; only output that never pauses is refused.
        deadline = time.monotonic() + max(self._timeout_s, RESYNC_WAIT_S)
        while select.select([self._socket], [], [], _QUIET_S)[0]:
            chunk = self._socket.recv(65536)
            if not chunk:
                detail = "the instrument closed the connection"
                raise InstrumentDisconnected(self.resource, command, detail)
            dropped += chunk
            if time.monotonic() > deadline:
                detail = "the instrument keeps sending; its output has no end to find"
                raise InstrumentError(self.resource, command, detail, hint="reset it, reconnect")
        self._count_answered(dropped)

    def _count_answered(self, dropped: bytes) -> None:
        """Probe answers drained are answered, too (lines split at the read terminator)."""
        if self._probe_reply is None:
            return
        lines = dropped.split(self._end)
        other = b"\n" if self._end == b"\r" else b"\r"
        answered = [line.strip(other) for line in lines].count(self._probe_reply.encode())
        self._probes_out = max(self._probes_out - answered, 0)


def _read_until_quiet(inst: Any, quiet_s: float, limit_s: float) -> bytes:
    """Read lines until none comes within `quiet_s`, for at most `limit_s`; what was dropped."""
    before = inst.timeout
    inst.timeout = max(round(quiet_s * 1000), 1)
    deadline = time.monotonic() + limit_s
    dropped = b""
    try:
        while time.monotonic() < deadline:
            try:
                dropped += inst.read_raw()
            except visa_errors.VisaIOError as exc:
                if exc.error_code == constants.StatusCode.error_timeout:
                    break
                raise
    finally:
        inst.timeout = before
    return dropped


def _pyvisa_py_session(inst: Any) -> Any:
    try:
        return inst.visalib.sessions[inst.session]
    except Exception:  # another backend, or no session: the socket fast paths are off
        return None


def _tcp_socket(session: Any) -> socket.socket | None:
    sock = getattr(session, "interface", None)
    has_buffer = isinstance(getattr(session, "_pending_buffer", None), bytearray)
    return sock if isinstance(sock, socket.socket) and has_buffer else None


__all__ = [
    "PROBE",
    "Transport",
    "VisaTransport",
    "check_message",
    "check_timeout",
    "open_visa",
]
