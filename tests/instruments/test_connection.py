"""connect() and Connection against a small in-test SCPI server (no simulator needed)."""

from __future__ import annotations

import io

import pytest

from instruments import Connection, connect
from instruments.errors import DialectError, InstrumentDisconnected, InstrumentError

IDN = "TEST,SOCKET-SMU,0007,1.0"


def smu_server(scripted_server, idn: str = IDN):
    """Answers *IDN? and OUTP?; records everything else."""
    replies = {"*IDN?": f"{idn}\n".encode(), "OUTP?": b"0\n"}
    return scripted_server(lambda command: replies.get(command))


def test_connect_identifies_and_close_leaves_the_output_off(scripted_server) -> None:
    server = smu_server(scripted_server)
    with connect(server.resource, timeout_s=0.5) as conn:
        assert isinstance(conn, Connection)
        assert (conn.resource, conn.identity) == (server.resource, IDN)
        assert conn.smu.output_is_on() is False
    assert server.wait_for(lambda got: got[-2:] == ["OUTP OFF", "SOUR:VOLT 0.000000E+00"])
    assert conn.closed
    conn.close()  # twice is harmless


def test_connect_with_a_spy_log_records_the_exchanges(scripted_server) -> None:
    server = smu_server(scripted_server)
    log = io.StringIO()
    with connect(server.resource, timeout_s=0.5, spy_log=log):
        pass
    fields = [line.split("\t")[2:] for line in log.getvalue().splitlines()]
    assert fields[:2] == [[">>", "*IDN?"], ["<<", IDN]]
    assert fields[-1] == [">>", "<close>"]


def test_reconnect_after_a_lost_link(scripted_server) -> None:
    server = smu_server(scripted_server)
    with connect(server.resource, timeout_s=0.5) as conn:
        old = conn.smu
        old.transport.close()  # as if the link broke
        with pytest.raises(InstrumentDisconnected):
            old.output(False)
        new = conn.reconnect()
        assert new is conn.smu and new is not old
        new.output(False)
    # the one after reconnecting, and the one of close()
    assert server.wait_for(lambda got: got.count("OUTP OFF") == 2)


def test_reconnect_refuses_a_different_instrument(scripted_server) -> None:
    first = smu_server(scripted_server)
    conn = connect(first.resource, timeout_s=0.5)
    try:
        other = smu_server(scripted_server, idn="TEST,OTHER-SMU,0008,1.0")
        conn.resource = other.resource  # as if a different instrument now had the address
        with pytest.raises(InstrumentError, match="not the original"):
            conn.reconnect()
    finally:
        conn.close()


def test_connect_refused_is_a_disconnect(free_port: int) -> None:
    with pytest.raises(InstrumentDisconnected, match="refused"):
        connect(f"TCPIP0::127.0.0.1::{free_port}::SOCKET", timeout_s=0.5)


def test_bad_dialect_fails_before_anything_is_opened(tmp_path, free_port: int) -> None:
    broken = tmp_path / "broken.yaml"
    broken.write_text("name: broken\n")
    with pytest.raises(DialectError, match="missing"):
        connect(f"TCPIP0::127.0.0.1::{free_port}::SOCKET", dialect=broken)


def test_simulator_options_only_for_sim(free_port: int) -> None:
    with pytest.raises(InstrumentError, match="simulator options"):
        connect(f"TCPIP0::127.0.0.1::{free_port}::SOCKET", sim_options={"seed": 1})
