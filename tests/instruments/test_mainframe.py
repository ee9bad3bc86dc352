"""A mainframe of source channels (dialect channel_suffix_mainframe) against a responder of that
family (tests/instruments/families.py MainframeSmu) over real TCP through pyvisa-py: every
channel of the station is switched off at the start and at the end, a channel is off before
the next one is used, and a dialect that names the channel in some commands only is refused."""

from __future__ import annotations

import pytest

from instruments import connect
from instruments.dialect import DIALECT_DIR, load_dialect
from instruments.errors import DialectError
from tests.instruments.families import MainframeSmu
from tests.instruments.linkserver import serving
from tests.instruments.standardsmu import Regulator, Resistor

MAINFRAME = DIALECT_DIR / "channel_suffix_mainframe.yaml"


def _mainframe() -> MainframeSmu:
    responder = MainframeSmu(devices={k: Regulator() for k in (1, 2, 3, 4)})
    responder.state[3]["on"] = 1.0  # left on by someone before us
    return responder


def test_every_channel_is_off_at_the_start_and_the_end() -> None:
    responder = _mainframe()
    with serving(responder.respond) as server:
        conn = connect(server.resource, dialect=MAINFRAME, channels=(1, 2, 3, 4))
        try:
            assert conn.smu.output_is_on()  # channel 3 reads on: the read-back covers all
            conn.smu.all_off()
            assert not conn.smu.output_is_on()
            assert not any(responder.on(k) for k in (1, 2, 3, 4))
            conn.smu.select_channel(2)
            conn.smu.set_voltage(5.0)
            conn.smu.output(True)
            conn.smu.check_errors()  # a query: every write before it has been taken
            assert responder.on(2)
            conn.smu.safe_state()  # what every ending sends, then its read-back (a query)
            assert not conn.smu.output_is_on()
            assert not any(responder.on(k) for k in (1, 2, 3, 4))
        finally:
            conn.close()


def test_a_channel_is_switched_off_before_the_next_is_addressed() -> None:
    responder = MainframeSmu(devices={1: Regulator(), 2: Resistor(5.0)})
    with serving(responder.respond) as server:
        conn = connect(server.resource, dialect=MAINFRAME, channels=(1, 2))
        try:
            smu = conn.smu
            smu.all_off()
            smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
            smu.set_voltage(25.0)
            smu.output(True)
            good = smu.measure()
            smu.select_channel(2)
            smu.check_errors()  # a query: every write before it has been taken
            assert not responder.on(1)
            smu.configure(limit_a=5e-3, nplc=1, settle_s=0)
            smu.set_voltage(25.0)
            smu.output(True)
            short = smu.measure()
            smu.check_errors()
        finally:
            conn.close()
    assert responder.most_on == 1
    assert good.current_a == pytest.approx(Regulator().current(25.0), rel=1e-6)
    assert not good.in_compliance
    assert short.in_compliance and short.current_a == pytest.approx(5e-3 * 0.995)
    assert {channel for channel, _ in responder.levels_applied} == {1, 2}


def test_a_dialect_naming_the_channel_in_some_commands_only_is_refused(tmp_path) -> None:
    text = MAINFRAME.read_text()
    old = 'output_query: "OUTP{channel}?"'
    assert old in text
    path = tmp_path / "mixed.yaml"
    path.write_text(text.replace(old, 'output_query: "OUTP?"'))
    line = next(
        n for n, t in enumerate(path.read_text().splitlines(), 1) if t.startswith("output_query:")
    )
    with pytest.raises(DialectError, match=r"must name \{channel\} too") as caught:
        load_dialect(path)
    assert str(caught.value).startswith(f"{path}:{line}: key 'output_query'")


def test_a_mainframe_dialect_reaches_channels_beyond_one_without_a_switch() -> None:
    dialect = load_dialect(MAINFRAME)
    assert dialect.select_channel is None
    assert dialect.channels_problem((1, 2, 3, 4)) is None
