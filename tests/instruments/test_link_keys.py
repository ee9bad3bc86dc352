"""Dialect keys for how an instrument talks, each against a responder of our own
(tests/instruments/standardsmu.py on tests/instruments/linkserver.py, not the simulator) over a
real TCP socket through pyvisa-py: line terminators CR and CRLF, identification (or none),
indefinite (#0) and REAL,64 blocks, a reply with an extra field, an overlapped INITiate."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from instruments import open_transport
from instruments.dialect import Dialect, load_dialect
from instruments.errors import InstrumentTimeout, ReplyError
from instruments.smu import NOT_IDENTIFIED, ScpiSmu
from tests.instruments.linkserver import serving
from tests.instruments.standardsmu import Regulator, Resistor, StandardSmu

LEVELS = [0.0, 2.0, 5.0, 10.0, 25.0]
DEVICE = Regulator()
EXPECTED = [DEVICE.current(v) for v in LEVELS]  # the textbook curve (tests/support/textbook.py)


def _variant(**changes: object) -> Dialect:
    return dataclasses.replace(load_dialect("scpi1999"), **changes)


def _smu(server, dialect: Dialect) -> ScpiSmu:
    smu = ScpiSmu(open_transport(server.resource, dialect, 1.0), dialect)
    smu.identify()
    smu.output(False)
    smu.start_up()
    assert not smu.output_is_on()
    return smu


def _list(responder: StandardSmu, dialect: Dialect, **terms: str):
    with serving(responder.respond, **terms) as server:
        smu = _smu(server, dialect)
        try:
            smu.output(True)
            sweep = smu.list_sweep(LEVELS, limit_a=5e-3, nplc=1, settle_s=0)
            smu.check_errors()
        finally:
            smu.safe_state()
            assert not smu.output_is_on()
            smu.close()
    return sweep


# --- line terminators ---------------------------------------------------------------------


@pytest.mark.parametrize("term", ["CR", "CRLF"])
def test_an_instrument_with_other_terminators_is_driven_with_the_dialect_keys(term: str) -> None:
    dialect = _variant(read_termination=term, write_termination=term)
    _, current, limited = _list(StandardSmu(), dialect, term_in=term, term_out=term)
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-6)
    assert not limited.any()


def test_without_the_terminator_key_a_cr_instrument_does_not_answer() -> None:
    responder = StandardSmu()
    with (
        serving(responder.respond, term_in="CR", term_out="CR") as server,
        pytest.raises(InstrumentTimeout),
    ):
        _smu(server, load_dialect("scpi1999"))


def test_a_block_ends_with_the_read_terminator() -> None:
    dialect = _variant(read_termination="CRLF", write_termination="CRLF")
    _, current, _ = _list(StandardSmu(), dialect, term_in="CRLF", term_out="CRLF")
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-6)  # a REAL,32 block, then CR LF


# --- identification -------------------------------------------------------------------------


def test_an_instrument_that_does_not_answer_idn_times_out_with_the_default() -> None:
    responder = StandardSmu(answers_idn=False)
    with serving(responder.respond) as server, pytest.raises(InstrumentTimeout):
        _smu(server, load_dialect("scpi1999"))


def test_identify_null_asks_nothing_and_says_so() -> None:
    responder = StandardSmu(answers_idn=False)
    dialect = _variant(identify=None)
    with serving(responder.respond) as server:
        smu = _smu(server, dialect)
        try:
            assert smu.identity == NOT_IDENTIFIED
            smu.check_errors()  # no -113: nothing it does not know was sent
        finally:
            smu.close()
        assert not any("IDN" in message for message in server.received)
    _, current, _ = _list(StandardSmu(answers_idn=False), dialect)
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-6)


def test_identify_by_another_query() -> None:
    with serving(StandardSmu(answers_idn=False).respond) as server:
        smu = _smu(server, _variant(identify="SYST:VERS?"))
        try:
            assert smu.identity == "1999.0"
        finally:
            smu.close()


# --- binary blocks --------------------------------------------------------------------------


def test_an_indefinite_block_is_read_as_the_values_expected() -> None:
    _, current, _ = _list(StandardSmu(block="indefinite"), load_dialect("scpi1999"))
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-6)  # float32: 7 digits


def test_an_indefinite_block_with_a_value_too_many_is_refused() -> None:
    with pytest.raises(ReplyError, match="followed by LF"):
        _list(StandardSmu(block="indefinite", extra_element=True), load_dialect("scpi1999"))


@pytest.mark.parametrize("order", ["NORM", "SWAP"])
def test_real_64_blocks_in_either_byte_order(order: str) -> None:
    dialect = _variant(
        binary_format=f"FORM REAL,64;:FORM:BORD {order}",
        binary_big_endian=order == "NORM",
        binary_bits=64,
    )
    _, current, _ = _list(StandardSmu(devices={1: DEVICE}), dialect)
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-12)  # float64: every digit


def test_real_64_read_as_real_32_is_refused_not_misread() -> None:
    dialect = _variant(binary_format="FORM REAL,64;:FORM:BORD SWAP")
    with pytest.raises(ReplyError, match="20 values for 5 points"):
        _list(StandardSmu(), dialect)


# --- a reply with an extra field ------------------------------------------------------------


def test_a_reading_with_an_extra_field_is_refused_naming_the_reply_then_flushed() -> None:
    with serving(StandardSmu(extra_element=True, devices={1: Resistor(10e3)}).respond) as server:
        smu = _smu(server, load_dialect("scpi1999"))
        try:
            smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
            smu.set_voltage(10.0)
            smu.output(True)
            with pytest.raises(ReplyError, match=r"reply '\+1\.000000E\+01,"):
                smu.measure()
            smu.output(False)
            assert not smu.output_is_on()  # the read-back is the answer to OUTP?, not a leftover
        finally:
            smu.close()


def test_a_list_reply_with_an_extra_field_is_refused_quoting_the_reply() -> None:
    ascii_only = _variant(binary_format=None, binary_big_endian=None)
    with pytest.raises(ReplyError, match=r"15 values for 5 points .* \(reply '\+0\.000000E\+00,"):
        _list(StandardSmu(extra_element=True), ascii_only)


def test_an_extra_field_named_ignore_in_the_dialect_is_read_past() -> None:
    dialect = _variant(
        measure_fields=("voltage", "current", "ignore", "status", "errors"),
        fetch_fields=("voltage", "current", "ignore"),
    )
    _, current, _ = _list(StandardSmu(extra_element=True), dialect)
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-6)


# --- an overlapped INITiate -----------------------------------------------------------------


def test_an_overlapped_list_fetched_at_once_is_refused_not_cut_short() -> None:
    with pytest.raises(ReplyError, match="FETC"):
        _list(StandardSmu(overlapped=True), _variant(binary_format=None, binary_big_endian=None))


@pytest.mark.parametrize("wait", ["*OPC?", "*WAI"])
def test_an_overlapped_list_with_a_wait_reads_every_point(wait: str) -> None:
    _, current, _ = _list(StandardSmu(overlapped=True), _variant(initiate_wait=wait))
    np.testing.assert_allclose(current, EXPECTED, rtol=1e-6)


# --- each key checked at load, with file:line and key ----------------------------------------


@pytest.mark.parametrize(
    ("old", "new", "key", "match"),
    [
        ("read_termination: null", "read_termination: NL", "read_termination", "LF, CR, CRLF"),
        ("write_termination: null", "write_termination: 10", "write_termination", "LF, CR"),
        ("binary_bits: null", "binary_bits: 16", "binary_bits", "32 or 64"),
        ('fetch: "FETC?"', 'fetch: "FETC? {volts}"', "fetch", "only {count}, {first}, {last}"),
        ('initiate: "INIT"', 'initiate: "INIT"\ninitiate_wait: "*OPC? {count}"', None, "no place"),
        ('identify: "*IDN?"', 'identify: ""', "identify", "must be text"),
    ],
)
def test_a_bad_link_key_is_named_with_its_line(tmp_path, old, new, key, match) -> None:
    from instruments.errors import DialectError
    from tests.instruments.test_dialect_files import _line_of, _write_variant

    if key is None:  # a key given twice would be a YAML error: replace the null one instead
        path = _write_variant(tmp_path, "initiate_wait: null", 'initiate_wait: "*OPC? {count}"')
        key, needle = "initiate_wait", "initiate_wait:"
    else:
        path = _write_variant(tmp_path, old, new)
        needle = f"{key}:"
    with pytest.raises(DialectError, match=match) as caught:
        load_dialect(path)
    assert str(caught.value).startswith(f"{path}:{_line_of(path, needle)}: key '{key}'")


def test_identify_may_be_null_but_the_output_read_back_may_not(tmp_path) -> None:
    from tests.instruments.test_dialect_files import _write_variant

    assert (
        load_dialect(_write_variant(tmp_path, 'identify: "*IDN?"', "identify: null")).identify
        is None
    )


def test_binary_bits_without_a_binary_format_is_refused(tmp_path) -> None:
    from instruments.errors import DialectError
    from tests.instruments.test_dialect_files import _write_variant

    text = _write_variant(tmp_path, "binary_bits: null", "binary_bits: 64").read_text()
    path = tmp_path / "b.yaml"
    path.write_text(
        text.replace('binary_format: "FORM REAL,32;:FORM:BORD SWAP"', "binary_format: null")
    )
    with pytest.raises(DialectError, match="key 'binary_bits': is set but binary_format is null"):
        load_dialect(path)


def test_identify_null_still_catches_a_refused_connection(free_port: int) -> None:
    from instruments.errors import InstrumentDisconnected

    resource = f"TCPIP0::127.0.0.1::{free_port}::SOCKET"
    with pytest.raises(InstrumentDisconnected, match="connection refused"):
        open_transport(resource, _variant(identify=None), 1.0)
