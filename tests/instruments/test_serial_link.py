"""Link settings as a station gives them: a serial line's settings reaching pyvisa-py on a real
pseudo-terminal, an instrument echoing every command (over a pty and over TCP), terminators of
the station winning over the dialect's, and a VISA library that cannot be loaded said in words.
The responders here are written from a plain description of an RS-232 instrument with echo on:
each command line comes back as received, then the reply, if any."""

from __future__ import annotations

import os
import pty
import threading
import tty
from collections.abc import Iterator
from contextlib import contextmanager

import pytest
from pyvisa import constants

from instruments import connect
from instruments.errors import InstrumentError, ReplyError
from instruments.transport import open_visa
from tests.instruments.linkserver import serving
from tests.instruments.standardsmu import StandardSmu

# a pty takes these, not parity or 7 data bits (termios refuses them there: EINVAL, measured)
SERIAL = {"baud": 19200, "data_bits": 8, "parity": "none", "stop_bits": 2}
SERIAL |= {"flow_control": "xon_xoff", "echo": True}


@contextmanager
def echoing_pty(responder: StandardSmu, echo: bool = True) -> Iterator[str]:
    """A pty whose far end is an instrument echoing each line (CR LF after it, as a terminal)."""
    master, slave = pty.openpty()
    tty.setraw(master)
    stop = threading.Event()

    def serve() -> None:
        buffer = b""
        while not stop.is_set():
            try:
                chunk = os.read(master, 4096)
            except OSError:
                return
            buffer += chunk
            while b"\n" in buffer:
                line, buffer = buffer.split(b"\n", 1)
                text = line.decode().strip()
                out = (text + "\n").encode() if echo else b""
                reply = responder.respond(text)
                if isinstance(reply, str):
                    out += (reply + "\n").encode()
                try:
                    os.write(master, out)
                except OSError:
                    return

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    try:
        yield f"ASRL{os.ttyname(slave)}::INSTR"
    finally:
        stop.set()
        os.close(slave)
        os.close(master)
        thread.join(timeout=2)


def test_serial_settings_reach_the_port_and_the_echo_is_read_past() -> None:
    with echoing_pty(StandardSmu()) as resource:
        transport = open_visa(resource, timeout_s=1.0, serial=SERIAL)
        try:
            inst = transport._inst
            assert inst.baud_rate == 19200 and inst.data_bits == 8
            assert inst.parity == constants.Parity.none
            assert inst.stop_bits == constants.StopBits.two
            assert inst.flow_control == constants.VI_ASRL_FLOW_XON_XOFF
            assert transport.query("*IDN?") == "STANDARD,SMU,0001,1.0"  # not the echo
            transport.write("OUTP ON")
            assert transport.query("OUTP?") == "1"
        finally:
            transport.close()


def test_without_echo_set_an_echoing_instrument_is_refused_not_misread() -> None:
    with echoing_pty(StandardSmu()) as resource:
        transport = open_visa(resource, timeout_s=1.0, probe=None)
        try:
            assert transport.query("OUTP?") == "OUTP?"  # the echo, taken for the reply ...
        finally:
            transport.close()
    # ... which is why a dialect's parser then refuses it: "OUTP?" is not a boolean
    with echoing_pty(StandardSmu()) as resource:
        conn = connect(resource, timeout_s=1.0, serial={"echo": False})
        try:
            with pytest.raises(ReplyError):
                conn.smu.output_is_on()
        finally:
            conn.close()


def test_parity_words_map_to_pyvisa() -> None:
    from instruments.transport import _serial_options

    for word in ("none", "odd", "even", "mark", "space"):
        assert _serial_options({"parity": word})["parity"] == getattr(constants.Parity, word)


def test_an_echo_that_is_not_the_command_is_refused() -> None:
    def respond(message: str) -> str:
        reply = StandardSmu().respond(message)
        return "SOMETHING ELSE" + ("\n" + reply if reply else "")

    with serving(respond) as server, pytest.raises(ReplyError, match="the echo of"):
        open_visa(server.resource, timeout_s=1.0, serial={"echo": True})


def test_an_echo_over_tcp_is_read_past_too() -> None:
    responder = StandardSmu()

    def respond(message: str) -> str:
        reply = responder.respond(message)
        return message + ("\n" + reply if isinstance(reply, str) else "")

    with serving(respond) as server:
        conn = connect(server.resource, timeout_s=1.0, serial={"echo": True})
        try:
            conn.smu.output(False)
            conn.smu.start_up()
            assert not conn.smu.output_is_on()
        finally:
            conn.close()


def test_the_station_terminators_win_over_the_dialect() -> None:
    with serving(StandardSmu().respond, term_in="CR", term_out="CR") as server:
        conn = connect(server.resource, timeout_s=1.0, terminators=("CR", "CR"))
        try:
            assert conn.identity == "STANDARD,SMU,0001,1.0"
        finally:
            conn.close()


def test_a_visa_library_that_cannot_be_loaded_is_one_clear_error() -> None:
    with pytest.raises(InstrumentError, match=r"VISA library '/no/such/libvisa\.so' cannot be"):
        connect("TCPIP0::127.0.0.1::9::SOCKET", visa_library="/no/such/libvisa.so")


def test_the_embedded_simulator_ignores_the_real_instruments_link_settings() -> None:
    conn = connect("sim", serial={"echo": True}, terminators=("CR", "CR"), sim_options={})
    try:
        assert conn.identity.startswith("CCBENCH,SIMULATED-SMU")
    finally:
        conn.close()
