"""One client's conversation with the shared instrument: a program message in, a reply out."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

from simulator.commands import COMMAND_COST_S, COMMANDS
from simulator.errors import ScpiError
from simulator.faults import Firing
from simulator.instrument import Instrument
from simulator.scpi_parser import Command, CommandTree, Unit, is_command_error, prepare


@cache
def command_tree() -> CommandTree:
    return CommandTree(COMMANDS)


@dataclass(frozen=True)
class Response:
    """The reply text of one program message, and the wire fault (if any) to send it with."""

    text: str | None
    fault: Firing | None = None

    @property
    def delivered(self) -> str | None:
        """What the client receives, ignoring timing: None for no-reply and close."""
        if self.fault is None or self.fault.kind == "late-reply":
            return self.text
        return self.fault.garbage if self.fault.kind == "garbage" else None


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

    `respond(message)` does the same and also says which wire fault fired (the server acts on
    it); `handle` returns what a client would receive, `Response.delivered`.
    """

    def __init__(self, instrument: Instrument) -> None:
        self.instrument = instrument
        self.tree = command_tree()
        if instrument.faults.tree is None:  # faults armed later resolve their `on:` here
            instrument.faults.tree = self.tree

    def handle(self, message: str) -> str | None:
        return self.respond(message).delivered

    def respond(self, message: str) -> Response:
        with self.instrument.lock:
            clock = self.instrument.clock
            clock.begin()
            try:
                return self._run(message)
            finally:
                clock.finish()

    def _run(self, message: str) -> Response:
        replies: list[str] = []
        wire: Firing | None = None
        inst = self.instrument
        try:
            steps = prepare(message.rstrip("\r"), self.tree)
        except ScpiError as error:
            inst.report(error)
            return Response(None)
        for step in steps:
            inst.clock.spend(COMMAND_COST_S)
            if isinstance(step, ScpiError):  # the unit did not parse or names no command
                inst.report(step)
                if is_command_error(step):
                    break
                continue
            try:
                firings = self._firings(step.command, step.unit)
                if firings:
                    wire = wire or next((f for f in firings if f.on_wire), None)
                    if wire is not None and wire.kind == "close":
                        return Response(None, wire)  # the connection drops before anything runs
                    self._apply(firings)  # an injected `error` raises here: the unit is not run
                reply = step.run(inst)
            except ScpiError as error:
                inst.report(error)
                if is_command_error(error):
                    break  # a command error discards the rest of the message
                continue
            if reply is not None:
                replies.append(reply)
        return Response(";".join(replies) if replies else None, wire)

    def _firings(self, command: Command, unit: Unit) -> list[Firing]:
        inst = self.instrument
        return inst.faults.on_unit(command, unit.header.query, inst.tray.closed, unit.header.text)

    def _apply(self, firings: list[Firing]) -> None:
        for firing in firings:
            if not firing.on_wire:
                self.instrument.apply_fault(firing)
