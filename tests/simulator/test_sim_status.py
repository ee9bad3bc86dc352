"""Error queue, event status and status byte (IEEE 488.2 ch 11, SCPI-1999 Vol 2 ch 20-21)."""

from __future__ import annotations

import pickle

import pytest

from simulator.errors import ErrorQueue, OptionError, ScpiError, error_texts, format_entry
from tests.simulator.conftest import errors


@pytest.mark.reference
def test_empty_queue_answers_no_error(session):
    # SCPI-1999 Vol 2 21.8.3 [SCPI.md 3.3]: 0,"No error"
    assert session.handle("SYST:ERR?") == '0,"No error"'
    assert session.handle("SYST:ERR:NEXT?") == '0,"No error"'
    assert session.handle("SYST:ERR:COUN?") == "0"


@pytest.mark.reference
def test_queue_is_fifo_with_detail_and_count(session):
    session.handle("BOGUS")
    session.handle("VOLT 500")
    assert session.handle("SYST:ERR:COUN?") == "2"
    assert session.handle("SYST:ERR?") == '-113,"Undefined header;BOGUS"'
    assert session.handle("SYST:ERR?").startswith('-222,"Data out of range;')
    assert session.handle("SYST:ERR?") == '0,"No error"'


@pytest.mark.reference
def test_overflow_replaces_the_newest_entry_with_minus_350(session):
    # SCPI-1999 Vol 2 21.8 [SCPI.md 3.3]: when full, the newest entry is replaced by -350
    for n in range(13):
        session.handle(f"VOLT {300 + n}")
    assert session.handle("SYST:ERR:COUN?") == "10"
    assert errors(session) == [-222] * 9 + [-350]


def test_queue_unit_overflow_keeps_the_oldest():
    queue = ErrorQueue(capacity=3)
    for code in (-101, -102, -103, -104):
        queue.push(code)
    assert queue.codes() == [-101, -102, -350]
    queue.push(-105)
    assert queue.codes() == [-101, -102, -350]


@pytest.mark.reference
@pytest.mark.parametrize(
    ("message", "bit"), [("BOGUS", 32), ("VOLT 500", 16), ("FETC?", 16), ("*OPC", 1)]
)
def test_esr_bit_per_error_class_and_cleared_by_reading(session, message, bit):
    # IEEE 488.2 11.5.1 [SCPI.md 3.2]: CME bit 5 for -1xx, EXE bit 4 for -2xx, OPC bit 0
    session.handle(message)
    assert session.handle("*ESR?") == str(bit)
    assert session.handle("*ESR?") == "0"


@pytest.mark.reference
def test_esr_bits_for_device_and_query_errors(inst, session):
    # IEEE 488.2 11.5.1: DDE bit 3 for -3xx, QYE bit 2 for -4xx
    inst.report(ScpiError(-363))
    inst.report(ScpiError(-410))
    assert session.handle("*ESR?") == str(8 | 4)


def test_overflow_sets_only_the_class_bit_of_the_errors_raised(session):
    for _ in range(11):
        session.handle("BOGUS")
    assert session.handle("*ESR?") == str(32)  # -350 takes a queue place; it raises no event


@pytest.mark.reference
def test_status_byte_summaries(session):
    # IEEE 488.2 11.2 / SCPI.md 3.2: bit 2 error queue, bit 3 QUES summary, bit 5 ESB, bit 6 MSS
    assert session.handle("*STB?") == "0"
    session.handle("BOGUS")
    assert session.handle("*STB?") == "4"
    session.handle("*ESE 32;*SRE 32")
    assert session.handle("*STB?") == str(4 | 32 | 64)
    assert session.handle("*ESE?;*SRE?") == "32;32"
    session.handle("*CLS")
    assert session.handle("*STB?") == "0"
    assert session.handle("*ESE?") == "32"  # *CLS keeps the enable masks


def test_cls_clears_queue_esr_and_ques_event(session):
    session.handle("BOGUS;")
    session.handle("ROUT:CLOS (@1);CURR:LIM 1E-6;:VOLT 10;:OUTP ON;:READ?")
    session.handle("*CLS")
    assert session.handle("SYST:ERR:COUN?;*ESR?;:STAT:QUES?") == "0;0;0"


# the numbers and texts the wire contract lists (SCPI-1999 / IEEE 488.2 standard texts)
WIRE_ERRORS = {
    -100: "Command error", -102: "Syntax error", -104: "Data type error",
    -108: "Parameter not allowed", -109: "Missing parameter", -113: "Undefined header",
    -114: "Header suffix out of range", -131: "Invalid suffix", -138: "Suffix not allowed",
    -141: "Invalid character data", -151: "Invalid string data", -200: "Execution error",
    -221: "Settings conflict", -222: "Data out of range", -224: "Illegal parameter value",
    -230: "Data corrupt or stale", -350: "Queue overflow", -410: "Query INTERRUPTED",
    -420: "Query UNTERMINATED",
}  # fmt: skip


@pytest.mark.reference
def test_error_texts_cover_every_number_the_wire_contract_names():
    texts = error_texts()
    assert {code: texts[code] for code in WIRE_ERRORS} == WIRE_ERRORS


def test_format_entry_doubles_quotes_and_errors_pickle():
    assert format_entry(-222, 'VOLT "x"') == '-222,"Data out of range;VOLT ""x"""'
    error = pickle.loads(pickle.dumps(ScpiError(-113, "BOGUS")))
    assert (error.code, error.detail, str(error)) == (
        -113,
        "BOGUS",
        '-113,"Undefined header;BOGUS"',
    )
    option = pickle.loads(pickle.dumps(OptionError("seed", "must be 0..999999")))
    assert isinstance(option, ValueError) and option.option == "seed"


def test_ques_enable_and_preset(session):
    session.handle("STAT:QUES:ENAB 2")
    assert session.handle("STAT:QUES:ENAB?") == "2"
    session.handle("STAT:PRES")
    assert session.handle("STAT:QUES:ENAB?") == "0"
