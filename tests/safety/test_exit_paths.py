"""Output off on every way out, seen in the SCPI text the driver sent (in process): the safe
start before anything else, the ramp down before output-off, an exception, a store failure, a
judge that raises, Ctrl-C at a chosen point, the normal end; and the signal gate that keeps a
second signal from cutting a shutdown short."""

from __future__ import annotations

import json
import signal

import pytest

import sequencer.bench.lotrun
import sequencer.store.runstore
from instruments.scpi import message_units
from sequencer.bench.benchrun import SignalGate, Terminated
from sequencer.model.errors import StoreError
from tests.safety.bench import SET_VOLTAGE, loop_bench
from tests.safety.test_guard import assert_output_off, run_loop


def tail_after_last_reading(sent: list[str]) -> list[str]:
    last = max(i for i, m in enumerate(sent) if m.startswith("READ?"))
    return sent[last + 1 :]


def test_the_instrument_is_made_safe_before_anything_else(tmp_path, monkeypatch):
    bench = loop_bench()
    bench.session.handle("SOUR:VOLT 30;:OUTP ON")  # left on by someone before us
    assert bench.instrument.smu.output_on
    code, text, _ = run_loop(tmp_path, monkeypatch, bench)
    assert code == 0, text
    off = ["OUTP OFF", "SOUR:VOLT 0.000000E+00"]
    # Off first; then the stale errors emptied, the dialect's setup (checked), off once more
    # after whatever the setup did, and only then the read-back.
    setup = ["SYST:ERR?", "*RST", "*CLS", "*OPC?", "SYST:ERR?"]
    assert bench.sent[:11] == ["*IDN?", *off, *setup, *off, "OUTP?"]
    assert_output_off(bench)


@pytest.mark.robustness
def test_an_output_that_will_not_read_off_is_refused_at_start(tmp_path, monkeypatch):
    bench = loop_bench()
    real = bench.handler
    bench.handler = lambda message: "1" if message == "OUTP?" else real(message)
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    last = text.strip().splitlines()[-1]
    assert "still reads ON after it was switched off" in last
    assert "THE OUTPUT MAY STILL BE ON" in last
    assert code == 6  # not 3: the code for an output not known to be off wins
    assert rows == [] and bench.levels_sent() == [0.0] * len(bench.levels_sent())


def test_levels_above_a_few_volts_are_ramped_down_before_output_off(tmp_path, monkeypatch):
    bench = loop_bench()
    real = bench.handler

    def fails_at_30_v(message: str):
        reply = real(message)
        if "READ?" in message_units(message) and bench.instrument.smu.level_v == 30.0:
            return "garbage"
        return reply

    bench.handler = fails_at_30_v
    code, _, rows = run_loop(tmp_path, monkeypatch, bench)
    assert code == 4 and rows[0]["verdict"] == "aborted"
    tail = tail_after_last_reading(bench.sent)  # what followed the garbled reading at 30 V
    levels = [float(m.group(1)) for s in tail if (m := SET_VOLTAGE.match(s))]
    assert levels[:6] == [25.0, 20.0, 15.0, 10.0, 5.0, 0.0]  # from 30 V in steps of at most 5 V
    assert tail.index("OUTP OFF") > tail.index("SOUR:VOLT 0.000000E+00")
    assert_output_off(bench)


@pytest.mark.robustness
def test_a_judge_that_raises_still_ends_with_the_output_off(tmp_path, monkeypatch):
    bench = loop_bench()
    real, calls = sequencer.bench.lotrun.judge_curve, []

    def judge(curve, settings):
        calls.append(curve.device)
        if len(calls) == 2:
            raise ValueError("judge gave up")
        return real(curve, settings)

    monkeypatch.setattr(sequencer.bench.lotrun, "judge_curve", judge)
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    last = text.strip().splitlines()[-1]
    assert code == 4
    assert last.startswith("ccbench: internal error (ValueError: judge gave up); output off")
    assert (tmp_path / "run" / "traceback.txt").read_text().count("judge gave up") >= 1
    assert len(rows) == 1  # the first device is kept
    assert_output_off(bench)


@pytest.mark.robustness
def test_a_store_failure_mid_run_ends_with_the_output_off(tmp_path, monkeypatch):
    bench = loop_bench()
    real = sequencer.store.runstore.RunStore.add_device

    def add(self, curve, judgement):
        if curve.channel == 2:
            raise StoreError("disk full (made up for the test)")
        real(self, curve, judgement)

    monkeypatch.setattr(sequencer.store.runstore.RunStore, "add_device", add)
    code, text, _ = run_loop(tmp_path, monkeypatch, bench)
    assert code == 5
    assert text.strip().splitlines()[-1] == (
        "ccbench: disk full (made up for the test); output off (read back from the instrument)"
    )
    assert_output_off(bench)


@pytest.mark.robustness
@pytest.mark.parametrize(
    ("raised", "why"), [(KeyboardInterrupt, "Ctrl-C"), (Terminated, "SIGTERM")]
)
def test_an_interrupt_mid_sweep_keeps_the_data_and_switches_off(tmp_path, monkeypatch, raised, why):
    bench = loop_bench()
    real, reads = bench.handler, []

    def interrupted(message: str):
        if "READ?" in message_units(message):
            reads.append(message)
            if len(reads) == 25:  # device 2, mid-sweep
                raise raised(f"stopped by {why}")
        return real(message)

    bench.handler = interrupted
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    assert code == 130
    assert (
        text.strip()
        .splitlines()[-1]
        .startswith(
            f"ccbench: stopped by {why}; output off (read back from the instrument); what was "
            "measured is kept in"
        )
    )
    assert [r["verdict"] for r in rows][1] == "aborted"
    assert_output_off(bench)


def test_normal_end_switches_off_and_reads_it_back(tmp_path, monkeypatch):
    bench = loop_bench()
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    assert code == 0 and len(rows) == 3
    assert "output off (read back from the instrument); results:" in text
    zero = "SOUR:VOLT 0.000000E+00"
    assert bench.sent[-8:] == [
        *(zero, "OUTP OFF"),  # the runner, at the end of the last device
        *(zero, "OUTP OFF", zero, "OUTP?"),  # make_safe: off again, and read back
        *("OUTP OFF", zero),  # closing the connection: the driver's safe state
    ]
    assert_output_off(bench)


# --- the signal gate --------------------------------------------------------------------------


def test_the_first_signal_raises_and_later_ones_do_not():
    gate = SignalGate()
    with pytest.raises(KeyboardInterrupt):
        gate.handler(signal.SIGINT, None)
    gate.handler(signal.SIGTERM, None)  # already stopping: recorded, not raised
    assert gate.received == [signal.SIGINT, signal.SIGTERM]


def test_a_signal_during_a_held_block_waits_for_its_end():
    gate, done = SignalGate(), []
    with pytest.raises(Terminated), gate.held():
        gate.handler(signal.SIGTERM, None)
        done.append("shutdown finished")  # not cut short
    assert done == ["shutdown finished"]


def test_inside_raising_a_held_signal_raises_at_once():
    gate = SignalGate()
    with gate.held():
        gate.handler(signal.SIGINT, None)  # arrived during the safe start
        with pytest.raises(KeyboardInterrupt), gate.raising():
            pytest.fail("the measurement must not start")  # pragma: no cover
        gate.handler(signal.SIGINT, None)  # during the shutdown: ignored
    assert gate.raised and len(gate.received) == 2


def test_an_error_left_from_before_the_run_is_reported_and_the_run_goes_on(tmp_path, monkeypatch):
    bench = loop_bench()
    bench.session.handle("NOT:A:COMMAND")  # someone before us left an error in the queue
    code, text, rows = run_loop(tmp_path, monkeypatch, bench)
    assert code == 0, text
    assert "held entries from before this session" in text
    assert len(rows) == 3
    manifest = json.loads((tmp_path / "run" / "manifest.json").read_text())
    record = manifest["sessions"][-1]["instruments"]["instrument"]
    assert record["errors_at_start"] and record["errors_at_start"][0][0] == -113
    assert record["compliance"] == {
        "single": "status bit 1 of the reading",
        "list": "clamp fraction: |I| >= 0.98 x the current limit",  # SCPI-1999: no list status
    }
    assert_output_off(bench)
