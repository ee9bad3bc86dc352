"""One client's conversation with the shared instrument: a program message in, a reply out."""

from __future__ import annotations

from functools import cache

from simulator.commands import COMMAND_COST_S, COMMANDS
from simulator.errors import ScpiError
from simulator.instrument import Instrument
from simulator.scpi_parser import CommandTree, parse_unit, run_unit, split_units


@cache
def command_tree() -> CommandTree:
    return CommandTree(COMMANDS)


class Session:
    """Runs SCPI program messages against an instrument, in process, without a socket.

        session = Session(instrument)
        session.handle("*IDN?")          -> 'CCBENCH,SIMULATED-SMU,SIM000001,0.1.0'
        session.handle("VOLT 5;OUTP ON") -> None  (no query in the message: no reply)
        session.handle("READ?;:STAT:QUES:COND?") -> '+5.000012E+00,+1.234567E-03;0'

    `handle(message)` takes one program message without its terminator (a trailing "\\r" is
    ignored) and returns the reply text without "\\n": the replies of its queries joined by ";",
    or None when it produced none (a command, or a query that failed). Errors go to the
    instrument's SCPI error queue, exactly as over TCP. A command error (-1xx) discards the
    rest of the message (IEEE 488.2); other errors let it go on. Several sessions may share
    one instrument; each message runs under the instrument's lock.
    """

    def __init__(self, instrument: Instrument) -> None:
        self.instrument = instrument
        self.tree = command_tree()

    def handle(self, message: str) -> str | None:
        replies: list[str] = []
        with self.instrument.lock:
            try:
                units = split_units(message.rstrip("\r"))
            except ScpiError as error:
                self.instrument.report(error)
                return None
            prefix: tuple[tuple[str, int | None], ...] = ()
            for text in units:
                self.instrument.clock.spend(COMMAND_COST_S)
                try:
                    unit = parse_unit(text)
                    command, path = self.tree.resolve(unit.header, prefix)
                    prefix = prefix if unit.header.common else path[:-1]
                    reply = run_unit(command, unit, self.instrument)
                except ScpiError as error:
                    self.instrument.report(error)
                    if -199 <= error.code <= -100:
                        break  # a command error discards the rest of the message
                    continue
                if reply is not None:
                    replies.append(reply)
        return ";".join(replies) if replies else None
