"""Commands joined into compound messages (dialect `max_message_bytes`, ScpiSmu.batch): the
same commands in the same order as one command per message, fewer exchanges, errors still
caught, the output-off never held back.

Joining follows IEEE 488.2 chapter 7 and SCPI-1999 volume 1 chapter 6: program message units
separated by ";", a leading ":" to start again from the root, common commands anywhere."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from instruments.dialect import Dialect, load_dialect
from instruments.errors import DialectError, ScpiError
from instruments.loopback import CallableTransport
from instruments.scpi import message_units
from instruments.smu import ScpiSmu
from sequencer.bench.lotrun import make_guard
from sequencer.plan.make import make_plan
from sequencer.run.device import measure_device
from sequencer.run.recorder import Recorder
from tests.instruments.test_dialect_files import _write_variant
from tests.support.lots import lot_smu, recipes

JOINED = load_dialect("scpi1999")
SEPARATE = dataclasses.replace(JOINED, max_message_bytes=None)


def test_units_of_a_compound_message_follow_the_scpi_rules() -> None:
    # IEEE 488.2 7.3 (";" separates units) and SCPI-1999 vol 1 6.2.4 (":" returns to the root);
    # a ";" inside a quoted string is data, not a separator.
    assert message_units("SOUR:VOLT 1;:READ?;*OPC?;:SYST:ERR?") == [
        "SOUR:VOLT 1",
        "READ?",
        "*OPC?",
        "SYST:ERR?",
    ]
    assert message_units('DISP:TEXT "a;b";:OUTP ON') == ['DISP:TEXT "a;b"', "OUTP ON"]


def measured(dialect: Dialect, which: int, channel: int, lists: bool):
    """(messages on the wire, the curve) of one simulated device, the demo's station."""
    recipe = dataclasses.replace(recipes()[which], lists=lists)
    messages: list[str] = []
    _, base = lot_smu(recipe, 3)
    real = base.transport.handler  # the in-process simulator

    def handle(message: str) -> str | None:
        messages.append(message)
        return real(message)

    smu = ScpiSmu(CallableTransport(handle, "sim-in-process"), dialect)
    plan = make_plan(recipe)
    recorder = Recorder()
    measure_device(smu, plan, channel, make_guard(recipe, smu), recorder)
    return messages, recorder.curve("d", channel, plan)


@pytest.mark.parametrize(("which", "lists"), [(0, False), (0, True), (1, True), (1, False)])
def test_joined_messages_carry_the_same_commands_and_give_the_same_readings(which, lists) -> None:
    joined, curve_joined = measured(JOINED, which, 2, lists)
    separate, curve_separate = measured(SEPARATE, which, 2, lists)
    units = [u for m in joined for u in message_units(m)]
    assert units == [u for m in separate for u in message_units(m)]
    np.testing.assert_array_equal(curve_joined.current_a, curve_separate.current_a)
    np.testing.assert_array_equal(curve_joined.voltage_v, curve_separate.voltage_v)
    assert len(joined) < 0.6 * len(separate)  # the point of it: fewer exchanges
    # nothing joined beyond the limit, except a single command that is longer on its own
    assert all(len(m) <= 4096 or len(message_units(m)) == 1 or "LIST:VOLT" in m for m in joined)
    # switching off is a message of its own
    assert "OUTP OFF" in joined


def test_each_level_goes_out_with_its_reading() -> None:
    joined, _ = measured(JOINED, 0, 1, lists=False)
    reads = [m for m in joined if "READ?" in m]
    assert reads and all(m.startswith("SOUR:VOLT ") for m in reads)


def scripted(errors: list[str] | None = None) -> tuple[ScpiSmu, list[str]]:
    sent: list[str] = []
    queue = list(errors or [])

    def handle(message: str) -> str | None:
        sent.append(message)
        if message.endswith("SYST:ERR?"):
            return queue.pop(0) if queue else '0,"No error"'
        return "1" if message.endswith("?") else None

    return ScpiSmu(CallableTransport(handle, "scripted"), JOINED), sent


def test_a_refused_command_in_a_joined_setup_is_still_caught() -> None:
    smu, sent = scripted(['-222,"Data out of range"'])
    with pytest.raises(ScpiError, match="-222"):
        smu.configure(limit_a=1e-3, nplc=1, settle_s=0)
    assert len(sent) == 2 and sent[0].startswith("SOUR:FUNC:MODE VOLT;:SOUR:CURR:LIM")
    assert sent[0].endswith(";:SYST:ERR?")


def test_held_commands_go_out_before_an_error_leaves_the_batch() -> None:
    smu, sent = scripted()
    with pytest.raises(RuntimeError), smu.batch():
        smu.set_voltage(2.0)
        raise RuntimeError("a check failed after the level was approved")
    assert sent == ["SOUR:VOLT 2.000000E+00"]


def test_output_off_is_never_held() -> None:
    smu, sent = scripted()
    with smu.batch():
        smu.set_voltage(0.0)
        smu.output(False)
        assert sent == ["SOUR:VOLT 0.000000E+00", "OUTP OFF"]  # sent at once, in order
        smu.output(True)
        assert sent[-1] == "OUTP OFF"  # on is held like any other command
    assert sent[-1] == "OUTP ON"


def test_without_a_settle_command_the_wait_starts_after_the_level_is_sent() -> None:
    events: list[str] = []
    dialect = dataclasses.replace(JOINED, set_settle=None)

    def handle(message: str) -> str | None:
        events.append(message)
        if message.endswith("SYST:ERR?"):
            return '0,"No error"'
        return "+1.0E+00,+1.0E-03;0;0" if "READ?" in message else None

    smu = ScpiSmu(CallableTransport(handle, "s"), dialect, sleep=lambda s: events.append("wait"))
    smu.configure(limit_a=1e-3, nplc=1, settle_s=0.01)
    with smu.batch():
        smu.set_voltage(1.0)
        smu.measure()
    assert events[-3:] == [
        "SOUR:VOLT 1.000000E+00",
        "wait",
        "READ?;:STAT:QUES:COND?;:SYST:ERR:COUN?",
    ]


@pytest.mark.parametrize("bad", ["0", "-5", "true", "lots"])
def test_a_bad_message_limit_in_a_dialect_file_is_one_clear_error(tmp_path, bad) -> None:
    path = _write_variant(tmp_path, "max_message_bytes: 4096", f"max_message_bytes: {bad}")
    with pytest.raises(DialectError, match="max_message_bytes"):
        load_dialect(path)
